"""The tables an assessment is kept in: one row per assessment, child tables for everything in it.

Every child row carries its ``position`` in the payload's list, so reading back in position order gives
the payload's order. Configurations and metrics are referred to by position, as in the payload.
Predictions and test indices are raw little-endian binary (float64, int64): compact and bit-exact.
The migrations in ``migrations/versions`` build this same schema; a test compares the two.
"""

from __future__ import annotations

from sqlalchemy import (
    JSON,
    Column,
    DateTime,
    Double,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    PrimaryKeyConstraint,
    String,
    Table,
    Text,
    UniqueConstraint,
)

# Named constraints, so that later migrations can refer to them on SQLite and PostgreSQL alike.
metadata = MetaData(naming_convention={
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
})

assessments = Table(
    "assessments", metadata,
    Column("id", Integer, primary_key=True),
    Column("uuid", String(36), nullable=False, unique=True),
    Column("name", String(200), nullable=False),
    Column("dataset", String(200)),
    # UTC wall time without zone (the same on every backend), plus the payload's own offset.
    Column("created_at", DateTime(timezone=False), nullable=False, index=True),
    Column("utc_offset", Integer, comment="seconds east of UTC; null when the payload's time had no zone"),
    Column("schema_version", Integer, nullable=False),
    Column("task", String(20), nullable=False),
    Column("n_repeats", Integer, nullable=False),
    Column("n_outer_folds", Integer, nullable=False),
    Column("n_inner_folds", Integer, nullable=False),
    Column("n_configs", Integer, nullable=False),
    Column("selection_metric", Text, nullable=False),
    Column("design", JSON, nullable=False),
    Column("versions", JSON, nullable=False),
    Column("seeds", JSON, nullable=False),
    Column("fingerprint", String(32), nullable=False),
    Column("total_fit_time", Double, nullable=False),
    Column("estimate_mean", Double),
    Column("estimate_sd", Double),
    Column("estimate_n_used", Integer, comment="outer folds the nested estimate used"),
    Column("estimate_low", Double, comment="the headline 95% interval (corrected resampled t): low end"),
    Column("estimate_high", Double, comment="the headline 95% interval (corrected resampled t): high end"),
    Column("content_digest", String(64), comment="digest of the assessment's content; null if stored before 0005"),
    Column("n_inner_scores", Integer, nullable=False),
    Column("n_outer_scores", Integer, nullable=False),
    Column("n_failures", Integer, nullable=False),
)


def _owner() -> Column:
    return Column("assessment_id", Integer, ForeignKey("assessments.id", ondelete="CASCADE"), nullable=False)


def _child(name: str, *columns, key: tuple[str, ...] = ("assessment_id", "position")) -> Table:
    return Table(name, metadata, _owner(), Column("position", Integer, nullable=False), *columns,
                 PrimaryKeyConstraint(*key))


families = _child(
    "families",
    Column("name", String(200), nullable=False),
    Column("estimator", Text, nullable=False),
    Column("estimator_class", String(500), nullable=False),
    Column("estimator_skops", LargeBinary, comment="skops file of the unfitted estimator; null if not kept"),
)

configurations = _child(
    "configurations",
    Column("config_id", Text, nullable=False),
    Column("family", String(200), nullable=False),
    Column("params", JSON, nullable=False),
)

outer_folds = _child(
    "outer_folds",
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("n_train", Integer, nullable=False),
    Column("n_test", Integer, nullable=False),
    Column("test_indices", LargeBinary, nullable=False, comment="little-endian int64"),
    Column("y_true", JSON(none_as_null=True)),
    UniqueConstraint("assessment_id", "repeat", "outer_fold"),
)


def _score_columns() -> list[Column]:
    return [Column("config", Integer, nullable=False), Column("metric", Integer, nullable=False),
            Column("score", Double), Column("fit_time", Double), Column("score_time", Double)]


inner_scores = _child(
    "inner_scores",
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("inner_fold", Integer, nullable=False),
    *_score_columns(),
    Index(None, "assessment_id", "repeat", "outer_fold"),
)

outer_scores = _child(
    "outer_scores",
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    *_score_columns(),
    Index(None, "assessment_id", "repeat", "outer_fold"),
)

# Derived from the inner scores as an assessment is stored (summaries.py), so that pages showing fold
# winners need not read every inner score. Not part of the payload, so it has no position.
inner_summaries = Table(
    "inner_summaries", metadata, _owner(),
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("config", Integer, nullable=False),
    Column("metric", Integer, nullable=False),
    Column("inner_mean", Double, comment="mean of the inner scores; null when any fit failed"),
    Column("inner_std", Double, comment="population sd of the inner scores; null when any fit failed"),
    PrimaryKeyConstraint("assessment_id", "repeat", "outer_fold", "config", "metric"),
)

fold_choices = _child(
    "fold_choices",
    Column("kind", String(10), nullable=False, comment="'family' or 'overall' winner"),
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("config", Integer, nullable=False),
    key=("assessment_id", "kind", "position"),
)

predictions = _child(
    "predictions",
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("config", Integer, nullable=False),
    Column("kind", String(10), nullable=False),
    Column("n_columns", Integer, nullable=False),
    Column("data", LargeBinary, nullable=False, comment="little-endian float64, row-major"),
    Index(None, "assessment_id", "config"),  # an ensemble's members' blocks without reading the rest
)

failures = _child(
    "failures",
    Column("level", String(10), nullable=False),
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("inner_fold", Integer),
    Column("config", Integer, nullable=False),
    Column("message", Text, nullable=False),
    Column("metric", Integer, comment="position in design.metrics of the one metric that failed; null: all"),
    Column("stage", String(10), comment="fit, score or predict; null if recorded before stages were kept"),
)

fitted_models = _child(
    "fitted_models",
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("config", Integer, nullable=False),
    Column("skops", LargeBinary, nullable=False, comment="skops file of the fitted fold winner"),
)

# The final selection on every row (runner/final.py), when the run made one: its scores and choice as the
# payload's JSON, its refit model apart, so reading the choice never reads the model.
final_selections = Table(
    "final_selections", metadata,
    Column("assessment_id", Integer, ForeignKey("assessments.id", ondelete="CASCADE"), primary_key=True),
    Column("selection", JSON, nullable=False, comment="the payload's `final` without its model"),
    Column("model", LargeBinary, comment="skops file of the chosen configuration refit on every row"),
)

# Ensembles are the store's own records, made after the assessment: not part of its payload.
ensembles = Table(
    "ensembles", metadata,
    Column("id", String(36), primary_key=True, comment="uuid4"),
    Column("assessment_id", Integer, ForeignKey("assessments.id", ondelete="CASCADE"), nullable=False,
           index=True),
    Column("name", String(200), nullable=False),
    Column("note", Text, nullable=False),
    Column("created_at", DateTime(timezone=False), nullable=False, comment="UTC"),
    Column("voting", String(10), nullable=False, comment="'soft', 'hard' or 'mean'"),
    Column("metric", Text, nullable=False, comment="the metric of the estimate below"),
    Column("estimate_mean", Double),
    Column("estimate_sd", Double),
)

ensemble_members = Table(
    "ensemble_members", metadata,
    Column("ensemble_id", String(36), ForeignKey("ensembles.id", ondelete="CASCADE"), nullable=False),
    Column("position", Integer, nullable=False),
    Column("config", Integer, nullable=False, comment="position in the assessment's configurations"),
    PrimaryKeyConstraint("ensemble_id", "position"),
)


# Runs in progress (``foldwise.live_payload``): the newest report of each, kept apart from the assessments. The
# finished assessment is stored under the run's uuid; from then on the run counts as finished (store/live.py).
live_runs = Table(
    "live_runs", metadata,
    Column("id", Integer, primary_key=True),
    Column("uuid", String(36), nullable=False, unique=True, comment="the run's uuid, its assessment's once pushed"),
    Column("name", String(200), nullable=False),
    Column("dataset", String(200)),
    Column("started_at", DateTime(timezone=False), nullable=False, comment="UTC"),
    Column("sent_at", DateTime(timezone=False), nullable=False, comment="UTC: when the run made the report kept"),
    Column("received_at", DateTime(timezone=False), nullable=False, index=True,
           comment="UTC, by the server's clock: when the run last reported"),
    Column("state", String(10), nullable=False, comment="'running', 'done' or 'stopped', as the run said"),
    Column("fits_done", Integer, nullable=False),
    Column("fits_total", Integer, nullable=False),
    Column("report", JSON, nullable=False, comment="the newest report without its folds"),
)

live_folds = Table(
    "live_folds", metadata,
    Column("live_run_id", Integer, ForeignKey("live_runs.id", ondelete="CASCADE"), nullable=False),
    Column("repeat", Integer, nullable=False),
    Column("outer_fold", Integer, nullable=False),
    Column("fold", JSON, nullable=False, comment="the completed fold as reported: sizes, winners, outer scores"),
    PrimaryKeyConstraint("live_run_id", "repeat", "outer_fold"),
)


def payload_fields(table: Table) -> list[str]:
    """A child table's columns other than its owner and position: the payload's field names."""
    return [column.name for column in table.columns][2:]
