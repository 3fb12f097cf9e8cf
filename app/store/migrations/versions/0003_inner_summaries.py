"""Inner mean and sd per outer fold, configuration and metric, kept beside the inner scores.

Filled for the assessments already stored, from their inner scores, by the computation insert used at
this revision (copied here, so this migration never changes when the application does; 0005 brings the
means of groups with a failed fit to the later rule).

Revision ID: 0003
Revises: 0002
"""

import numpy as np
import sqlalchemy as sa
from alembic import op

KEYS = ("repeat", "outer_fold", "config", "metric")

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


def inner_summary_columns(*columns) -> dict[str, list]:
    """Per (repeat, outer_fold, config, metric) group: the mean of its scores with failed fits (null) left
    out, and the population sd, null when any fit of the group failed; the rule of this revision."""
    *keys, scores = columns
    keys = [np.asarray(column, dtype=np.int64) for column in keys]
    scores = np.asarray(scores, dtype=float)
    order = np.lexsort(keys[::-1])
    keys, scores = [column[order] for column in keys], scores[order]
    starts = np.flatnonzero(np.r_[True, np.any([column[1:] != column[:-1] for column in keys], axis=0)])
    sizes = np.diff(np.r_[starts, scores.size])
    scored = ~np.isnan(scores)
    counts = np.add.reduceat(scored.astype(np.int64), starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.add.reduceat(np.where(scored, scores, 0.0), starts) / counts
        deviation = scores - np.repeat(mean, sizes)
        std = np.sqrt(np.add.reduceat(deviation * deviation, starts) / sizes)
    columns = {name: column[starts].tolist() for name, column in zip(KEYS, keys, strict=True)}
    return columns | {name: [None if value != value else value for value in values.tolist()]
                      for name, values in (("inner_mean", mean), ("inner_std", std))}
