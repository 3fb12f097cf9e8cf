"""What failed in a fit: ``failures.metric`` and ``failures.stage``.

- ``failures.metric``: the position in ``design.metrics`` of the one metric whose scoring failed, while
  the fit's other metrics kept their scores; null when the whole fit failed (every metric NaN).
- ``failures.stage``: "fit", "score" or "predict"; null for failures stored before stages were kept
  (a whole fit failed, or its scoring).

Revision ID: 0008
Revises: 0007
"""

import sqlalchemy as sa
from alembic import op

revision = "0008"
down_revision = "0007"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.add_column("failures", sa.Column("metric", sa.Integer(), nullable=True,
                                        comment="position in design.metrics of the one metric that failed; null: all"))
    op.add_column("failures", sa.Column("stage", sa.String(10), nullable=True,
                                        comment="fit, score or predict; null if recorded before stages were kept"))


def downgrade() -> None:
    op.drop_column("failures", "stage")
    op.drop_column("failures", "metric")
