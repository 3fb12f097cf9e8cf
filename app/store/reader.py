"""One read of the store: a connection in one snapshot, and the assessments read through it.

``StoreReader.open(engine)`` opens one connection and one read transaction (one snapshot on SQLite's
WAL and PostgreSQL's REPEATABLE READ alike), so every read of a request sees the store as it was when
the first one ran, however many writers commit meanwhile. ``store.assessment(uuid)`` finds an assessment
once and hands back an ``AssessmentReader``, which keeps its record (design, families, configurations)
and offers the reads pages need, filtered in SQL and named as ``foldwise.frames`` names its columns.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from functools import cached_property

import numpy as np
import pandas as pd
from sqlalchemy import Connection, Engine, Row, Table, and_, func, or_, select, tuple_

from foldwise import frames
from foldwise.definitions import optimism
from foldwise.payload import AssessmentPayload, Configuration
from foldwise.store import ensembles, restore, tables
from foldwise.store.engine import write_transaction
from foldwise.store.ensembles import EnsembleRecord, StoredModel
from foldwise.store.lookup import AssessmentNotFound, find_assessment, uuid_text
from foldwise.store.queries import FAILURE_COLUMNS, AssessmentRecord, assessment_index, record_from
from foldwise.store.restore import StoredFinal, StoredPrediction

WINNER_KINDS = ("family", "overall", "either")
COST_COLUMNS = ["level", "family", "n_fits", "seconds", "n_timed"]
_SCORES = {"score": "float64", "fit_time": "float64", "score_time": "float64"}


class StoreReader:
    """The store as one request reads it: one connection, one transaction, assessments found once each."""

    def __init__(self, connection: Connection):
        self.connection = connection
        self._assessments: dict[str, AssessmentReader | None] = {}

    @classmethod
    @contextmanager
    def open(cls, engine: Engine, *, write: bool = False) -> Iterator[StoreReader]:
        """A reader over one connection in one read transaction, rolled back (nothing to keep) on leaving.

        With ``write`` the transaction is ``write_transaction``'s instead (on SQLite holding the write lock
        from its start), committed on success: for a request that saves what it has just read.
        """
        if write:
            with write_transaction(engine) as connection:
                yield cls(connection)
            return
        with engine.connect() as connection:
            if engine.dialect.name == "postgresql":
                # READ COMMITTED (the default) takes a new snapshot per statement; this keeps one.
                connection = connection.execution_options(isolation_level="REPEATABLE READ")
            with connection.begin() as transaction:
                yield cls(connection)
                transaction.rollback()

    def assessment(self, uuid: str) -> AssessmentReader | None:
        """The assessment with this uuid (any spelling of it), or None when it is not stored or not a uuid."""
        try:
            key = uuid_text(uuid)
        except ValueError:
            return None
        if key not in self._assessments:
            row = find_assessment(self.connection, key)
            self._assessments[key] = None if row is None else AssessmentReader(self.connection, row)
        return self._assessments[key]

    def require(self, uuid: str) -> AssessmentReader:
        """The assessment with this uuid; ``AssessmentNotFound`` (a LookupError) when there is none."""
        found = self.assessment(uuid)
        if found is None:
            raise AssessmentNotFound(f"no assessment with uuid {uuid!r} in this store")
        return found

    def assessments(self, *, dataset: str | None = None, name: str | None = None) -> pd.DataFrame:
        """The stored assessments, newest first (``queries.list_assessments``), optionally those whose dataset
        or name contains a text (ignoring case)."""
        return assessment_index(self.connection, dataset=dataset, name=name)

    def fingerprints(self) -> dict[str, str]:
        """Each stored assessment's outer-folds fingerprint, by uuid: equal fingerprints can be paired."""
        a = tables.assessments
        return {row.uuid: row.fingerprint for row in self.connection.execute(select(a.c.uuid, a.c.fingerprint))}

    def count_assessments(self) -> int:
        """How many assessments the store holds."""
        return int(self.connection.scalar(select(func.count()).select_from(tables.assessments)))

    def ensemble_counts(self) -> dict[str, int]:
        """How many saved ensembles each assessment has, by assessment uuid (absent: none)."""
        return ensembles.ensemble_counts_in(self.connection)

    def ensemble(self, ensemble_id: str) -> EnsembleRecord | None:
        """The saved ensemble, or None when there is none with that id (or the id is not a uuid)."""
        return ensembles.ensemble_in(self.connection, ensemble_id)


class AssessmentReader:
    """One stored assessment, read through its store reader's connection.

    The record (design, families, configurations, the stored nested estimate) is read once; every
    other read is one query filtered in SQL. Configurations and metrics come back by name (the
    configuration's id, its family and params; the metric's name), as ``foldwise.frames`` has them.
    """

    def __init__(self, connection: Connection, row: Row):
        self._connection, self._row = connection, row

    @cached_property
    def record(self) -> AssessmentRecord:
        return record_from(self._connection, self._row)

    @property
    def uuid(self) -> str:
        return self._row.uuid

    @property
    def configurations(self) -> list[Configuration]:
        return self.record.configurations

    def metric_position(self, metric: str | None) -> int:
        """The position of ``metric`` in the design's metrics; the selection metric's (0) when None."""
        metrics = self.record.design.metrics
        if metric is None:
            return 0
        if metric not in metrics:
            raise ValueError(f"metric {metric!r} was not recorded in assessment {self.uuid}; choose one of "
                             f"{metrics}")
        return metrics.index(metric)

    def outer(self, *, metric: str | None = None, winners: str | None = None, configs: Sequence[str] = (),
              repeat: int | None = None, outer_fold: int | None = None) -> pd.DataFrame:
        """Outer scores (columns ``frames.OUTER_COLUMNS``) in payload order, with fold sizes and winners.

        Every score, or those of one ``metric``, of one fold, and with ``winners`` ("family", "overall" or
        "either") only the rows of that kind of fold winner plus those of the configuration ids in
        ``configs``: a page comparing fold winners reads a few hundred rows, not every score.
        """
        s, o = tables.outer_scores, tables.outer_folds
        where = self._fold_filter(s, repeat, outer_fold)
        if metric is not None:
            where.append(s.c.metric == self.metric_position(metric))
        if winners is not None:
            chosen = self._chosen(s, winners)
            where.append(or_(chosen, self._among(s, configs)) if configs else chosen)
        query = (select(s.c.repeat, s.c.outer_fold, *_score_columns(s), o.c.n_train, o.c.n_test)
                 .join(o, and_(o.c.assessment_id == s.c.assessment_id, o.c.repeat == s.c.repeat,
                               o.c.outer_fold == s.c.outer_fold))
                 .where(s.c.assessment_id == self._row.id, *where).order_by(s.c.position))
        frame = pd.read_sql(query, self._connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                             "n_train": "int64", "n_test": "int64"} | _SCORES)
        keys = pd.MultiIndex.from_arrays([frame["repeat"], frame["outer_fold"], frame["config"]])
        for kind in ("family", "overall"):
            chosen = self._choices[kind]
            frame[f"{kind}_winner"] = keys.isin(chosen) if chosen else np.zeros(len(frame), dtype=bool)
        return self._named(frame)[frames.OUTER_COLUMNS]

    def inner(self, *, metric: str | None = None, repeat: int | None = None,
              outer_fold: int | None = None) -> pd.DataFrame:
        """Inner scores (columns ``frames.INNER_COLUMNS``) in payload order: every one, or those of one
        metric and one fold."""
        s = tables.inner_scores
        where = self._fold_filter(s, repeat, outer_fold)
        if metric is not None:
            where.append(s.c.metric == self.metric_position(metric))
        query = (select(s.c.repeat, s.c.outer_fold, s.c.inner_fold, *_score_columns(s))
                 .where(s.c.assessment_id == self._row.id, *where).order_by(s.c.position))
        frame = pd.read_sql(query, self._connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                             "inner_fold": "int64"} | _SCORES)
        return self._named(frame)[frames.INNER_COLUMNS]

    def winners(self, *, kind: str = "overall", metric: str | None = None) -> pd.DataFrame:
        """The fold winners of ``kind`` ("overall" or "family") as ``frames.winners_frame`` gives them, on
        ``metric`` (default: the selection metric), without reading the inner scores: the chosen outer
        scores beside the inner summaries stored with the assessment (``store/summaries.py``)."""
        if kind not in ("overall", "family"):
            raise ValueError(f"kind must be 'overall' or 'family'; received {kind!r}")
        o, summary = tables.outer_scores, tables.inner_summaries
        same = [summary.c[name] == o.c[name] for name in ("assessment_id", "repeat", "outer_fold", "config",
                                                          "metric")]
        query = (select(o.c.repeat, o.c.outer_fold, o.c.config, o.c.metric, summary.c.inner_mean,
                        summary.c.inner_std, o.c.score.label("outer_score"))
                 .outerjoin(summary, and_(*same))
                 .where(o.c.assessment_id == self._row.id, o.c.metric == self.metric_position(metric),
                        self._chosen(o, kind))
                 .order_by(o.c.position))
        frame = pd.read_sql(query, self._connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                             "inner_mean": "float64", "inner_std": "float64",
                                                             "outer_score": "float64"})
        frame = self._named(frame)
        frame["optimism"] = optimism(frame["inner_mean"], frame["outer_score"])
        order = ["repeat", "outer_fold"] if kind == "overall" else ["repeat", "outer_fold", "family"]
        return frame.sort_values(order, kind="stable").reset_index(drop=True)[frames.WINNER_COLUMNS]

    def fold_sizes(self) -> pd.DataFrame:
        """One row per stored outer fold, indexed by (repeat, outer_fold) in that order: ``n_train``, ``n_test``."""
        return self._fold_sizes.copy()

    @cached_property
    def _fold_sizes(self) -> pd.DataFrame:
        o = tables.outer_folds
        rows = self._connection.execute(select(o.c.repeat, o.c.outer_fold, o.c.n_train, o.c.n_test)
                                        .where(o.c.assessment_id == self._row.id)
                                        .order_by(o.c.repeat, o.c.outer_fold)).all()
        sizes = pd.DataFrame(rows, columns=["repeat", "outer_fold", "n_train", "n_test"], dtype="int64")
        return sizes.set_index(["repeat", "outer_fold"])

    def failures(self, *, repeat: int | None = None, outer_fold: int | None = None,
                 limit: int | None = None) -> pd.DataFrame:
        """The failed fits, and failed parts of fits, in payload order (at most ``limit``), of every fold or
        of one; ``inner_fold`` is a nullable Int64 (missing for outer fits); ``metric`` names the one metric
        whose scoring failed (None: the whole fit failed, or its predictions); ``stage`` is fit, score or
        predict (None when recorded before stages)."""
        f, c = tables.failures, tables.configurations
        query = (select(f.c.level, f.c.repeat, f.c.outer_fold, f.c.inner_fold, c.c.family,
                        c.c.config_id.label("config"), f.c.metric, f.c.stage, f.c.message)
                 .join(c, and_(c.c.assessment_id == f.c.assessment_id, c.c.position == f.c.config))
                 .where(f.c.assessment_id == self._row.id, *self._fold_filter(f, repeat, outer_fold))
                 .order_by(f.c.position).limit(limit))
        frame = pd.read_sql(query, self._connection)
        metrics = self.record.design.metrics
        frame["metric"] = [None if position is None or position != position else metrics[int(position)]
                           for position in frame["metric"]]
        frame["stage"] = frame["stage"].astype(object).where(frame["stage"].notna(), None)
        return frame.astype({"repeat": "int64", "outer_fold": "int64", "inner_fold": "Int64"})[FAILURE_COLUMNS]

    def failure_counts(self) -> dict[str, int]:
        """How many failures each level ("inner", "outer") recorded; absent: none."""
        f = tables.failures
        rows = self._connection.execute(select(f.c.level, func.count()).where(f.c.assessment_id == self._row.id)
                                        .group_by(f.c.level)).all()
        return {level: int(count) for level, count in rows}

    def fit_costs(self) -> pd.DataFrame:
        """Per level ("inner", "outer") and family, in family order: the fits (``n_fits``, failed ones too)
        and the seconds they took (fit + score time, summed over the ``n_timed`` fits with both times).

        Each fit is recorded once per metric with the same times, so the selection metric's rows are the
        fits; the sums are taken by the database, without reading a score.
        """
        c, found = tables.configurations, {}
        for level, s in (("inner", tables.inner_scores), ("outer", tables.outer_scores)):
            seconds = s.c.fit_time + s.c.score_time
            query = (select(c.c.family, func.count(), func.sum(seconds), func.count(seconds))
                     .join(c, and_(c.c.assessment_id == s.c.assessment_id, c.c.position == s.c.config))
                     .where(s.c.assessment_id == self._row.id, s.c.metric == 0).group_by(c.c.family))
            for family, n, total, timed in self._connection.execute(query).all():
                found[level, family] = (int(n), float(total or 0.0), int(timed))
        rows = [(level, family.name, *found.get((level, family.name), (0, 0.0, 0)))
                for level in ("inner", "outer") for family in self.record.families]
        return pd.DataFrame(rows, columns=COST_COLUMNS)

    def ensembles(self) -> list[EnsembleRecord]:
        """The assessment's saved ensembles, oldest first."""
        return ensembles.ensembles_in(self._connection, self._row.id)

    def ensemble_members(self) -> pd.DataFrame:
        """One row per saved ensemble and member (columns ``ensembles.MEMBER_COLUMNS``), for the CSV export."""
        return ensembles.members_frame(self.configurations, self.ensembles())

    def fitted_model_counts(self) -> dict[str, int]:
        """How many kept fitted fold winners each configuration id has (absent: none)."""
        return ensembles.fitted_model_counts_in(self._connection, self._row.id)

    def fitted_models(self, configs: list[str]) -> list[StoredModel]:
        """The kept fitted fold winners of the configurations ``configs``, in payload order."""
        return ensembles.fitted_models_in(self._connection, self._row, self.configurations, configs)

    def predictions(self, configs: list[str]) -> list[StoredPrediction]:
        """The outer-test predictions of the configuration ids in ``configs``, in payload order."""
        return restore.predictions_in(self._connection, self._row, self.configurations, configs)

    def fold_targets(self) -> list[tuple[int, int, list | None]]:
        """(repeat, outer_fold, true targets of its test rows or None) per outer fold, in payload order."""
        return restore.fold_targets_in(self._connection, self._row.id)

    def save_ensemble(self, *, name: str, note: str, members: list[str], voting: str, metric: str,
                      estimate_mean: float | None, estimate_sd: float | None) -> EnsembleRecord:
        """Save an ensemble of this assessment's configurations; only in a store reader opened to write."""
        ensemble_id = ensembles.insert_ensemble_in(
            self._connection, self._row, self.configurations, name=name, note=note, members=members,
            voting=voting, metric=metric, estimate_mean=estimate_mean, estimate_sd=estimate_sd)
        return ensembles.ensemble_in(self._connection, ensemble_id)

    def final_selection(self) -> StoredFinal | None:
        """The final selection on every row without its model's bytes; None when the run made none."""
        return restore.final_selection_in(self._connection, self._row.id)

    def final_model(self) -> bytes | None:
        """The skops file of the final selection's refit on every row; None when the run made or kept none."""
        return restore.final_model_in(self._connection, self._row.id)

    def payload(self) -> AssessmentPayload:
        """The payload exactly as it was stored."""
        return restore.payload_in(self._connection, self._row, self.record)

    @cached_property
    def _choices(self) -> dict[str, list[tuple[int, int, int]]]:
        ch = tables.fold_choices
        rows = self._connection.execute(select(ch.c.kind, ch.c.repeat, ch.c.outer_fold, ch.c.config)
                                        .where(ch.c.assessment_id == self._row.id)).all()
        return {kind: [(r, o, c) for k, r, o, c in rows if k == kind] for kind in ("family", "overall")}

    @cached_property
    def _names(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Configuration ids, families and params by position; metric names by position."""
        configs = self.configurations
        ids, families, params = (np.empty(len(configs), dtype=object) for _ in range(3))
        for position, config in enumerate(configs):
            ids[position], families[position], params[position] = config.id, config.family, config.params
        return ids, families, params, np.array(self.record.design.metrics, dtype=object)

    def _named(self, frame: pd.DataFrame) -> pd.DataFrame:
        """Config and metric positions replaced by family, config id, params and metric name."""
        ids, families, params, metrics = self._names
        positions = frame["config"].to_numpy(dtype=np.int64)
        frame["family"], frame["config"], frame["params"] = families[positions], ids[positions], params[positions]
        frame["metric"] = metrics[frame["metric"].to_numpy(dtype=np.int64)]
        return frame

    def _chosen(self, table: Table, kind: str):
        """Rows of ``table`` whose (repeat, outer_fold, config) is a fold winner of ``kind`` (or of either)."""
        if kind not in WINNER_KINDS:
            raise ValueError(f"winners must be 'family', 'overall' or 'either' (or None for every row); "
                             f"received {kind!r}")
        ch = tables.fold_choices
        chosen = select(ch.c.repeat, ch.c.outer_fold, ch.c.config).where(ch.c.assessment_id == self._row.id)
        if kind != "either":
            chosen = chosen.where(ch.c.kind == kind)
        return tuple_(table.c.repeat, table.c.outer_fold, table.c.config).in_(chosen)

    def _among(self, table: Table, configs: Sequence[str]):
        """Rows of ``table`` of the configurations with these ids (positions known from the record)."""
        wanted = set(configs)
        return table.c.config.in_([position for position, config in enumerate(self.configurations)
                                   if config.id in wanted])

    def _fold_filter(self, table: Table, repeat: int | None, outer_fold: int | None) -> list:
        row, where = self._row, []
        for name, value, size in (("repeat", repeat, row.n_repeats), ("outer_fold", outer_fold, row.n_outer_folds)):
            if value is None:
                continue
            if not (isinstance(value, int | np.integer) and 0 <= value < size):
                raise ValueError(f"{name} must be an integer in 0..{size - 1} for assessment {row.uuid}; "
                                 f"received {value!r}")
            where.append(table.c[name] == int(value))
        return where


@contextmanager
def read_assessment(engine: Engine, uuid: str) -> Iterator[AssessmentReader]:
    """The assessment's reader in a store reader of its own; ``AssessmentNotFound`` when it is not stored,
    ValueError when ``uuid`` is not a uuid."""
    uuid_text(uuid)
    with StoreReader.open(engine) as store:
        yield store.require(uuid)


def _score_columns(table: Table) -> list:
    return [table.c.config, table.c.metric, table.c.score, table.c.fit_time, table.c.score_time]


# One-shot reads for scripts and tests: each opens its own reader. Pages take a request's reader instead.

def get_assessment(engine: Engine, uuid: str) -> AssessmentRecord | None:
    """The assessment's record, or None when the store has no assessment with that uuid."""
    uuid_text(uuid)
    with StoreReader.open(engine) as store:
        found = store.assessment(uuid)
        return None if found is None else found.record


def inner_scores_for(engine: Engine, uuid: str, *, repeat: int | None = None,
                     outer_fold: int | None = None) -> pd.DataFrame:
    """Every inner score (columns ``frames.INNER_COLUMNS``), in payload order, optionally of one fold."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.inner(repeat=repeat, outer_fold=outer_fold)


def outer_scores_for(engine: Engine, uuid: str, *, metric: str | None = None, winners: str | None = None,
                     configs: Sequence[str] = ()) -> pd.DataFrame:
    """``AssessmentReader.outer``: outer scores with fold sizes and winners, optionally filtered."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.outer(metric=metric, winners=winners, configs=configs)


def fold_sizes_for(engine: Engine, uuid: str) -> pd.DataFrame:
    """``AssessmentReader.fold_sizes``: ``n_train`` and ``n_test`` indexed by (repeat, outer_fold)."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.fold_sizes()


def winners_for(engine: Engine, uuid: str, *, metric: str | None = None) -> pd.DataFrame:
    """The overall fold winners, as ``frames.winners_frame`` gives them (``AssessmentReader.winners``)."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.winners(kind="overall", metric=metric)


def family_winners_for(engine: Engine, uuid: str, *, metric: str | None = None) -> pd.DataFrame:
    """Each family's fold winners, as ``frames.winners_frame`` gives them (``AssessmentReader.winners``)."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.winners(kind="family", metric=metric)


def failures_for(engine: Engine, uuid: str) -> pd.DataFrame:
    """``AssessmentReader.failures``: the failed fits and failed parts of fits, in payload order."""
    with read_assessment(engine, uuid) as assessment:
        return assessment.failures()
