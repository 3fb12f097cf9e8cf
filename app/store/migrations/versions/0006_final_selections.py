"""The final selection of an assessment: the inner selection on every row and its refit model.

Revision ID: 0006
Revises: 0005
"""

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "final_selections",
        sa.Column("assessment_id", sa.Integer(), nullable=False),
        sa.Column("selection", sa.JSON(), nullable=False, comment="the payload's `final` without its model"),
        sa.Column("model", sa.LargeBinary(), nullable=True,
                  comment="skops file of the chosen configuration refit on every row"),
        sa.ForeignKeyConstraint(["assessment_id"], ["assessments.id"], ondelete="CASCADE",
                                name="fk_final_selections_assessment_id_assessments"),
        sa.PrimaryKeyConstraint("assessment_id", name="pk_final_selections"),
    )


def downgrade() -> None:
    op.drop_table("final_selections")
