"""Estimators and fitted fold winners as skops files, and saved ensembles of fold winners.

Revision ID: 0002
Revises: 0001
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.add_column("families", sa.Column("estimator_skops", sa.LargeBinary(), nullable=True,
                                        comment="skops file of the unfitted estimator; null if not kept"))
    op.create_table(
        "fitted_models",
        sa.Column("assessment_id", sa.Integer(), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("config", sa.Integer(), nullable=False),
        sa.Column("skops", sa.LargeBinary(), nullable=False, comment="skops file of the fitted fold winner"),
        sa.ForeignKeyConstraint(["assessment_id"], ["assessments.id"], ondelete="CASCADE",
                                name="fk_fitted_models_assessment_id_assessments"),
        sa.PrimaryKeyConstraint("assessment_id", "position", name="pk_fitted_models"),
    )
    op.create_table(
        "ensembles",
        sa.Column("id", sa.String(36), nullable=False, comment="uuid4"),
        sa.Column("assessment_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("note", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=False), nullable=False, comment="UTC"),
        sa.Column("voting", sa.String(10), nullable=False, comment="'soft', 'hard' or 'mean'"),
        sa.Column("metric", sa.Text(), nullable=False, comment="the metric of the estimate below"),
        sa.Column("estimate_mean", sa.Double(), nullable=True),
        sa.Column("estimate_sd", sa.Double(), nullable=True),
        sa.ForeignKeyConstraint(["assessment_id"], ["assessments.id"], ondelete="CASCADE",
                                name="fk_ensembles_assessment_id_assessments"),
        sa.PrimaryKeyConstraint("id", name="pk_ensembles"),
    )
    op.create_index("ix_ensembles_assessment_id", "ensembles", ["assessment_id"])
    op.create_table(
        "ensemble_members",
        sa.Column("ensemble_id", sa.String(36), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("config", sa.Integer(), nullable=False,
                  comment="position in the assessment's configurations"),
        sa.ForeignKeyConstraint(["ensemble_id"], ["ensembles.id"], ondelete="CASCADE",
                                name="fk_ensemble_members_ensemble_id_ensembles"),
        sa.PrimaryKeyConstraint("ensemble_id", "position", name="pk_ensemble_members"),
    )


def downgrade() -> None:
    op.drop_table("ensemble_members")
    op.drop_index("ix_ensembles_assessment_id", table_name="ensembles")
    op.drop_table("ensembles")
    op.drop_table("fitted_models")
    with op.batch_alter_table("families") as batch:
        batch.drop_column("estimator_skops")
