"""The headline interval of the nested estimate, kept beside it: 95%, corrected resampled t.

Filled for the assessments already stored from their overall winners' outer scores and fold sizes, by the
computation written out here (Nadeau and Bengio's variance correction, Student t with J - 1 degrees of
freedom over the J folds used), so this migration never changes when the application does.

Revision ID: 0007
Revises: 0006
"""

import math

import numpy as np
import sqlalchemy as sa
from alembic import op
from scipy import stats

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.add_column("assessments", sa.Column("estimate_low", sa.Double(), nullable=True,
                                           comment="the headline 95% interval (corrected resampled t): low end"))
    op.add_column("assessments", sa.Column("estimate_high", sa.Double(), nullable=True,
                                           comment="the headline 95% interval (corrected resampled t): high end"))
    connection = op.get_bind()
    for (assessment_id,) in connection.execute(sa.text("SELECT id FROM assessments")).all():
        rows = connection.execute(sa.text(
            'SELECT s.score, f.n_train, f.n_test FROM outer_scores s JOIN fold_choices c '
            'ON c.assessment_id = s.assessment_id AND c."repeat" = s."repeat" AND c.outer_fold = s.outer_fold '
            "AND c.config = s.config JOIN outer_folds f ON f.assessment_id = s.assessment_id "
            'AND f."repeat" = s."repeat" AND f.outer_fold = s.outer_fold '
            "WHERE s.assessment_id = :id AND c.kind = 'overall' AND s.metric = 0 AND s.score IS NOT NULL"),
            {"id": assessment_id}).all()
        low, high = _interval([row[0] for row in rows], [row[1] for row in rows], [row[2] for row in rows])
        connection.execute(sa.text("UPDATE assessments SET estimate_low = :low, estimate_high = :high "
                                   "WHERE id = :id"), {"low": low, "high": high, "id": assessment_id})


def _interval(scores, n_train, n_test) -> tuple[float | None, float | None]:
    j = len(scores)
    if j < 2:
        return None, None
    values = np.asarray(scores, dtype=float)
    mean, variance = float(values.mean()), float(values.var(ddof=1))
    ratio = float(np.mean(n_test)) / float(np.mean(n_train))
    half = float(stats.t.ppf(0.975, j - 1)) * math.sqrt((1 / j + ratio) * variance)
    return mean - half, mean + half


def downgrade() -> None:
    op.drop_column("assessments", "estimate_high")
    op.drop_column("assessments", "estimate_low")
