"""The first schema: assessments and their families, configurations, folds, scores, choices,
predictions and failures.

Revision ID: 0001
Revises:
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

_CHILDREN = ("families", "configurations", "outer_folds", "inner_scores", "outer_scores", "fold_choices",
             "predictions", "failures")


def _owner(table):
    return [
        sa.Column("assessment_id", sa.Integer(), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["assessment_id"], ["assessments.id"], ondelete="CASCADE",
                                name=f"fk_{table}_assessment_id_assessments"),
    ]


def _key(table, *columns):
    return sa.PrimaryKeyConstraint(*(columns or ("assessment_id", "position")), name=f"pk_{table}")


def _scores():
    return [
        sa.Column("config", sa.Integer(), nullable=False),
        sa.Column("metric", sa.Integer(), nullable=False),
        sa.Column("score", sa.Double(), nullable=True),
        sa.Column("fit_time", sa.Double(), nullable=True),
        sa.Column("score_time", sa.Double(), nullable=True),
    ]


def upgrade() -> None:
    op.create_table(
        "assessments",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("uuid", sa.String(36), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("dataset", sa.String(200), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=False), nullable=False),
        sa.Column("utc_offset", sa.Integer(), nullable=True,
                  comment="seconds east of UTC; null when the payload's time had no zone"),
        sa.Column("schema_version", sa.Integer(), nullable=False),
        sa.Column("task", sa.String(20), nullable=False),
        sa.Column("n_repeats", sa.Integer(), nullable=False),
        sa.Column("n_outer_folds", sa.Integer(), nullable=False),
        sa.Column("n_inner_folds", sa.Integer(), nullable=False),
        sa.Column("n_configs", sa.Integer(), nullable=False),
        sa.Column("selection_metric", sa.Text(), nullable=False),
        sa.Column("design", sa.JSON(), nullable=False),
        sa.Column("versions", sa.JSON(), nullable=False),
        sa.Column("seeds", sa.JSON(), nullable=False),
        sa.Column("fingerprint", sa.String(32), nullable=False),
        sa.Column("total_fit_time", sa.Double(), nullable=False),
        sa.Column("estimate_mean", sa.Double(), nullable=True),
        sa.Column("estimate_sd", sa.Double(), nullable=True),
        sa.Column("n_inner_scores", sa.Integer(), nullable=False),
        sa.Column("n_outer_scores", sa.Integer(), nullable=False),
        sa.Column("n_failures", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("id", name="pk_assessments"),
        sa.UniqueConstraint("uuid", name="uq_assessments_uuid"),
    )
    op.create_index("ix_assessments_created_at", "assessments", ["created_at"])

    op.create_table(
        "families", *_owner("families"),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("estimator", sa.Text(), nullable=False),
        sa.Column("estimator_class", sa.String(500), nullable=False),
        _key("families"),
    )
    op.create_table(
        "configurations", *_owner("configurations"),
        sa.Column("config_id", sa.Text(), nullable=False),
        sa.Column("family", sa.String(200), nullable=False),
        sa.Column("params", sa.JSON(), nullable=False),
        _key("configurations"),
    )
    op.create_table(
        "outer_folds", *_owner("outer_folds"),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("n_train", sa.Integer(), nullable=False),
        sa.Column("n_test", sa.Integer(), nullable=False),
        sa.Column("test_indices", sa.LargeBinary(), nullable=False, comment="little-endian int64"),
        sa.Column("y_true", sa.JSON(none_as_null=True), nullable=True),
        _key("outer_folds"),
        sa.UniqueConstraint("assessment_id", "repeat", "outer_fold",
                            name="uq_outer_folds_assessment_id_repeat_outer_fold"),
    )
    op.create_table(
        "inner_scores", *_owner("inner_scores"),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("inner_fold", sa.Integer(), nullable=False),
        *_scores(),
        _key("inner_scores"),
    )
    op.create_index("ix_inner_scores_assessment_id_repeat_outer_fold", "inner_scores",
                    ["assessment_id", "repeat", "outer_fold"])
    op.create_table(
        "outer_scores", *_owner("outer_scores"),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        *_scores(),
        _key("outer_scores"),
    )
    op.create_index("ix_outer_scores_assessment_id_repeat_outer_fold", "outer_scores",
                    ["assessment_id", "repeat", "outer_fold"])
    op.create_table(
        "fold_choices", *_owner("fold_choices"),
        sa.Column("kind", sa.String(10), nullable=False, comment="'family' or 'overall' winner"),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("config", sa.Integer(), nullable=False),
        _key("fold_choices", "assessment_id", "kind", "position"),
    )
    op.create_table(
        "predictions", *_owner("predictions"),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("config", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(10), nullable=False),
        sa.Column("n_columns", sa.Integer(), nullable=False),
        sa.Column("data", sa.LargeBinary(), nullable=False, comment="little-endian float64, row-major"),
        _key("predictions"),
    )
    op.create_table(
        "failures", *_owner("failures"),
        sa.Column("level", sa.String(10), nullable=False),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("inner_fold", sa.Integer(), nullable=True),
        sa.Column("config", sa.Integer(), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        _key("failures"),
    )


def downgrade() -> None:
    for table in reversed(_CHILDREN):
        op.drop_table(table)
    op.drop_table("assessments")
