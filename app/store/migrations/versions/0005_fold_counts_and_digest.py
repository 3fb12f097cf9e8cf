"""The nested estimate's fold count, a content digest per assessment, and one rule for a failed inner fold.

- ``assessments.estimate_n_used``: how many outer folds the nested estimate used (the design has
  ``n_repeats * n_outer_folds``); filled for stored assessments from their overall winners' outer scores.
- ``assessments.content_digest``: a digest of the assessment's content, so that a second push of the same
  uuid can be told apart as identical or different; null for assessments stored before it.
- ``inner_summaries.inner_mean`` becomes null where any inner fit of the group failed (where
  ``inner_std`` already was): a configuration with a failed inner fold has no inner mean, as in the
  selection rule.

Revision ID: 0005
Revises: 0004
"""

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Plain ALTER TABLE (SQLite 3.35+ drops columns too): a batch copy of this table would, with foreign
    # keys on, cascade the drop of the old table to every child row.
    op.add_column("assessments", sa.Column("estimate_n_used", sa.Integer(), nullable=True,
                                           comment="outer folds the nested estimate used"))
    op.add_column("assessments", sa.Column("content_digest", sa.String(64), nullable=True,
                                           comment="digest of the assessment's content; null if stored before 0005"))
    op.execute(sa.text(
        'UPDATE assessments SET estimate_n_used = (SELECT COUNT(*) FROM outer_scores s JOIN fold_choices c '
        'ON c.assessment_id = s.assessment_id AND c."repeat" = s."repeat" AND c.outer_fold = s.outer_fold '
        "AND c.config = s.config WHERE s.assessment_id = assessments.id AND c.kind = 'overall' "
        "AND s.metric = 0 AND s.score IS NOT NULL)"))
    op.execute(sa.text("UPDATE inner_summaries SET inner_mean = NULL WHERE inner_std IS NULL"))
    if op.get_bind().dialect.name != "sqlite":  # SQLite keeps no column comments
        op.alter_column("inner_summaries", "inner_mean", existing_type=sa.Double(), existing_nullable=True,
                        comment="mean of the inner scores; null when any fit failed",
                        existing_comment="mean of the inner scores, failed fits left out")


def downgrade() -> None:
    op.drop_column("assessments", "content_digest")
    op.drop_column("assessments", "estimate_n_used")
