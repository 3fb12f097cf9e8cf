"""Runs in progress: ``live_runs`` (the newest report of each) and ``live_folds`` (its completed outer folds).

Revision ID: 0009
Revises: 0008
"""

import sqlalchemy as sa
from alembic import op

revision = "0009"
down_revision = "0008"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "live_runs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("uuid", sa.String(36), nullable=False, comment="the run's uuid, its assessment's once pushed"),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("dataset", sa.String(200), nullable=True),
        sa.Column("started_at", sa.DateTime(timezone=False), nullable=False, comment="UTC"),
        sa.Column("sent_at", sa.DateTime(timezone=False), nullable=False,
                  comment="UTC: when the run made the report kept"),
        sa.Column("received_at", sa.DateTime(timezone=False), nullable=False,
                  comment="UTC, by the server's clock: when the run last reported"),
        sa.Column("state", sa.String(10), nullable=False, comment="'running', 'done' or 'stopped', as the run said"),
        sa.Column("fits_done", sa.Integer(), nullable=False),
        sa.Column("fits_total", sa.Integer(), nullable=False),
        sa.Column("report", sa.JSON(), nullable=False, comment="the newest report without its folds"),
        sa.PrimaryKeyConstraint("id", name="pk_live_runs"),
        sa.UniqueConstraint("uuid", name="uq_live_runs_uuid"),
    )
    op.create_index("ix_live_runs_received_at", "live_runs", ["received_at"])
    op.create_table(
        "live_folds",
        sa.Column("live_run_id", sa.Integer(), nullable=False),
        sa.Column("repeat", sa.Integer(), nullable=False),
        sa.Column("outer_fold", sa.Integer(), nullable=False),
        sa.Column("fold", sa.JSON(), nullable=False,
                  comment="the completed fold as reported: sizes, winners, outer scores"),
        sa.ForeignKeyConstraint(["live_run_id"], ["live_runs.id"], ondelete="CASCADE",
                                name="fk_live_folds_live_run_id_live_runs"),
        sa.PrimaryKeyConstraint("live_run_id", "repeat", "outer_fold", name="pk_live_folds"),
    )


def downgrade() -> None:
    op.drop_table("live_folds")
    op.drop_index("ix_live_runs_received_at", table_name="live_runs")
    op.drop_table("live_runs")
