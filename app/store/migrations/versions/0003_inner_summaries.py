"""Inner mean and sd per outer fold, configuration and metric, kept beside the inner scores.

Filled for the assessments already stored, from their inner scores, by the same computation as at
insert (``foldwise.store.summaries``).

Revision ID: 0003
Revises: 0002
"""

import sqlalchemy as sa
from alembic import op

from foldwise.store.summaries import KEYS, inner_summary_columns

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    summaries = op.create_table(
        "inner_summaries",
        sa.Column("assessment_id", sa.Integer(), nullable=False),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("config", sa.Integer(), nullable=False),
        sa.Column("metric", sa.Integer(), nullable=False),
        sa.Column("inner_mean", sa.Double(), nullable=True,
                  comment="mean of the inner scores, failed fits left out"),
        sa.Column("inner_std", sa.Double(), nullable=True,
                  comment="population sd of the inner scores; null when any fit failed"),
        sa.ForeignKeyConstraint(["assessment_id"], ["assessments.id"], ondelete="CASCADE",
                                name="fk_inner_summaries_assessment_id_assessments"),
        sa.PrimaryKeyConstraint("assessment_id", *KEYS, name="pk_inner_summaries"),
    )
    connection = op.get_bind()
    for (assessment_id,) in connection.execute(sa.text("SELECT id FROM assessments")).all():
        rows = connection.execute(sa.text('SELECT "repeat", outer_fold, config, metric, score FROM inner_scores '
                                          "WHERE assessment_id = :id"), {"id": assessment_id}).all()
        columns = inner_summary_columns(*zip(*rows, strict=True)) if rows else None
        if columns:
            names = list(columns)
            op.bulk_insert(summaries, [dict(zip(names, values, strict=True), assessment_id=assessment_id)
                                       for values in zip(*columns.values(), strict=True)])


def downgrade() -> None:
    op.drop_table("inner_summaries")
