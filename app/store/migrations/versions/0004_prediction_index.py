"""An index on the predictions by configuration, so an ensemble of a few members reads only their blocks.

Without it, scoring an ensemble of 5 configurations out of 300 reads every prediction block of the
assessment (tens of MB at 5,000 samples) to find the 1 in 60 it needs.

Revision ID: 0004
Revises: 0003
"""

from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index("ix_predictions_assessment_id_config", "predictions", ["assessment_id", "config"])


def downgrade() -> None:
    op.drop_index("ix_predictions_assessment_id_config", table_name="predictions")
