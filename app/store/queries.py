"""Reading assessments: the index, one assessment's record, and its scores as the frames of ``frames``."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import Connection, Engine, Row, Table, and_, or_, select, tuple_

from foldwise import frames
from foldwise.definitions import HEADLINE_LEVEL, HEADLINE_METHOD, NestedEstimate
from foldwise.payload import Configuration, Design, Family
from foldwise.stats.intervals import Interval
from foldwise.store import tables
from foldwise.store.lookup import created_at_of, find_assessment, require_assessment

INDEX_COLUMNS = ["uuid", "name", "dataset", "created_at", "task", "n_repeats", "n_outer_folds",
                 "n_inner_folds", "n_configs", "families", "selection_metric", "estimate_mean", "estimate_sd",
                 "estimate_n_used", "estimate_n_folds", "estimate_low", "estimate_high"]
FAILURE_COLUMNS = ["level", "repeat", "outer_fold", "inner_fold", "family", "config", "metric", "stage", "message"]
_SCORES = {"score": "float64", "fit_time": "float64", "score_time": "float64"}


@dataclass(frozen=True)
class AssessmentRecord:
    """One assessment without its scores: what a page header or an API summary shows.

    ``estimate`` is the nested estimate (``foldwise.definitions.NestedEstimate``): mean and sample sd
    (ddof=1) of the overall fold winners' outer scores on the selection metric, NaN where undefined, with
    the number of outer folds it used of the design's.
    """

    uuid: str
    name: str
    dataset: str | None
    created_at: datetime
    design: Design
    families: list[Family]
    configurations: list[Configuration]
    fingerprint: str
    versions: dict[str, str]
    seeds: dict[str, Any]
    total_fit_time: float
    estimate: NestedEstimate
    n_inner_scores: int
    n_outer_scores: int
    n_failures: int

    @property
    def family_names(self) -> list[str]:
        return [family.name for family in self.families]

    @property
    def n_folds(self) -> int:
        """Outer folds over every repeat of the design."""
        return self.design.n_repeats * self.design.n_outer_folds


def list_assessments(engine: Engine, *, dataset: str | None = None, name: str | None = None) -> pd.DataFrame:
    """The stored assessments, newest first, optionally those whose dataset or name contains a text.

    Filters ignore case. ``created_at`` is in UTC; ``families`` lists family names in payload order.
    """
    a = tables.assessments
    where = [column.icontains(text, autoescape=True)
             for column, text in ((a.c.dataset, dataset), (a.c.name, name)) if text]
    with engine.connect() as connection:
        index = pd.read_sql(select(a.c.id, *(a.c[column] for column in INDEX_COLUMNS
                                             if column not in ("families", "estimate_n_folds")))
                            .where(*where).order_by(a.c.created_at.desc(), a.c.id.desc()), connection)
        members = connection.execute(
            select(tables.families.c.assessment_id, tables.families.c.name)
            .where(tables.families.c.assessment_id.in_(select(a.c.id).where(*where)))
            .order_by(tables.families.c.assessment_id, tables.families.c.position)).all()
    names: dict[int, list[str]] = {}
    for assessment_id, family in members:
        names.setdefault(assessment_id, []).append(family)
    index["families"] = pd.Series([names.get(i, []) for i in index["id"]], index=index.index, dtype=object)
    index["created_at"] = pd.to_datetime(index["created_at"]).dt.tz_localize("UTC")
    index["estimate_n_used"] = index["estimate_n_used"].fillna(0)
    index["estimate_n_folds"] = index["n_repeats"] * index["n_outer_folds"]
    index = index.astype({"n_repeats": "int64", "n_outer_folds": "int64", "n_inner_folds": "int64",
                          "n_configs": "int64", "estimate_mean": "float64", "estimate_sd": "float64",
                          "estimate_n_used": "int64", "estimate_n_folds": "int64", "estimate_low": "float64",
                          "estimate_high": "float64"})
    return index[INDEX_COLUMNS]


def get_assessment(engine: Engine, uuid: str) -> AssessmentRecord | None:
    """The assessment's record, or None when the store has no assessment with that uuid."""
    with engine.connect() as connection:
        row = find_assessment(connection, uuid)
        return None if row is None else record_from(connection, row)


def inner_scores_for(engine: Engine, uuid: str, *, repeat: int | None = None,
                     outer_fold: int | None = None) -> pd.DataFrame:
    """Every inner score (columns ``frames.INNER_COLUMNS``), in payload order, optionally of one fold."""
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        return inner_frame(connection, row, repeat=repeat, outer_fold=outer_fold)


def outer_scores_for(engine: Engine, uuid: str, *, metric: str | None = None, winners: str | None = None,
                     configs: Sequence[str] = ()) -> pd.DataFrame:
    """Outer scores (columns ``frames.OUTER_COLUMNS``) in payload order, with fold sizes and winners.

    Every score, or only those of one ``metric`` and, with ``winners="family"``, ``"overall"`` or
    ``"either"``, only the rows of that kind of fold winner, plus those of the configuration ids in
    ``configs``: a page that compares fold winners reads a few hundred rows, not every score.
    """
    with engine.connect() as connection:
        return outer_frame(connection, require_assessment(connection, uuid), metric=metric, winners=winners,
                           configs=configs)


def fold_sizes_for(engine: Engine, uuid: str) -> pd.DataFrame:
    """One row per stored outer fold, in (repeat, outer_fold) order: ``n_train`` and ``n_test``, indexed by
    (repeat, outer_fold), as ``fold_scores.fold_sizes`` lays them out."""
    o = tables.outer_folds
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        rows = connection.execute(select(o.c.repeat, o.c.outer_fold, o.c.n_train, o.c.n_test)
                                  .where(o.c.assessment_id == row.id).order_by(o.c.repeat, o.c.outer_fold)).all()
    sizes = pd.DataFrame(rows, columns=["repeat", "outer_fold", "n_train", "n_test"], dtype="int64")
    return sizes.set_index(["repeat", "outer_fold"])


def winners_for(engine: Engine, uuid: str, *, metric: str | None = None) -> pd.DataFrame:
    """The overall fold winners, as ``frames.winners_frame`` gives them, on ``metric`` (default: the
    selection metric); the inner mean and sd come from the summaries stored with the assessment."""
    return _winners(engine, uuid, kind="overall", metric=metric)


def family_winners_for(engine: Engine, uuid: str, *, metric: str | None = None) -> pd.DataFrame:
    """Each family's fold winners, as ``frames.winners_frame`` gives them, on ``metric`` (default: the
    selection metric); the inner mean and sd come from the summaries stored with the assessment."""
    return _winners(engine, uuid, kind="family", metric=metric)


def failures_for(engine: Engine, uuid: str) -> pd.DataFrame:
    """The failed fits, and failed parts of fits, in payload order; ``inner_fold`` is a nullable Int64
    (missing for outer fits); ``metric`` names the one metric whose scoring failed (None: the whole fit
    failed, or its predictions); ``stage`` is fit, score or predict (None when recorded before stages)."""
    f, c = tables.failures, tables.configurations
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        query = (select(f.c.level, f.c.repeat, f.c.outer_fold, f.c.inner_fold, c.c.family,
                        c.c.config_id.label("config"), f.c.metric, f.c.stage, f.c.message)
                 .join(c, and_(c.c.assessment_id == f.c.assessment_id, c.c.position == f.c.config))
                 .where(f.c.assessment_id == row.id).order_by(f.c.position))
        frame = pd.read_sql(query, connection)
    metrics = Design.model_validate(row.design).metrics
    frame["metric"] = [None if position is None or position != position else metrics[int(position)]
                       for position in frame["metric"]]
    frame["stage"] = frame["stage"].astype(object).where(frame["stage"].notna(), None)
    return frame.astype({"repeat": "int64", "outer_fold": "int64", "inner_fold": "Int64"})[FAILURE_COLUMNS]


def record_from(connection: Connection, row: Row) -> AssessmentRecord:
    f = tables.families
    families = connection.execute(select(f.c.name, f.c.estimator, f.c.estimator_class)
                                  .where(f.c.assessment_id == row.id).order_by(f.c.position)).all()
    return AssessmentRecord(
        uuid=row.uuid, name=row.name, dataset=row.dataset, created_at=created_at_of(row),
        design=Design.model_validate(row.design), families=[Family(**family._mapping) for family in families],
        configurations=configurations_of(connection, row.id), fingerprint=row.fingerprint,
        versions=row.versions, seeds=row.seeds, total_fit_time=row.total_fit_time,
        estimate=estimate_of(row),
        n_inner_scores=row.n_inner_scores, n_outer_scores=row.n_outer_scores, n_failures=row.n_failures)


def estimate_of(row: Row) -> NestedEstimate:
    """The stored nested estimate of an assessment row, with its fold counts."""
    n_folds = row.n_repeats * row.n_outer_folds
    # Stored before the count was kept and never filled (no outer score at all): none used.
    n_used = row.estimate_n_used if row.estimate_n_used is not None else 0
    mean = _nan_for_none(row.estimate_mean)
    interval = Interval(estimate=mean, low=_nan_for_none(row.estimate_low), high=_nan_for_none(row.estimate_high),
                        level=HEADLINE_LEVEL, method=HEADLINE_METHOD, n_used=n_used, n_failed=n_folds - n_used)
    return NestedEstimate(mean=mean, sd=_nan_for_none(row.estimate_sd), n_used=n_used, n_folds=n_folds,
                          interval=interval)


def configurations_of(connection: Connection, assessment_id: int) -> list[Configuration]:
    c = tables.configurations
    rows = connection.execute(select(c.c.config_id, c.c.family, c.c.params)
                              .where(c.c.assessment_id == assessment_id).order_by(c.c.position)).all()
    return [Configuration(id=config, family=family, params=params) for config, family, params in rows]


def inner_frame(connection: Connection, row: Row, *, repeat: int | None = None, outer_fold: int | None = None,
                metric: int | None = None) -> pd.DataFrame:
    s = tables.inner_scores
    where = [s.c[name] == value for name, value in
             _fold_filter(row, repeat=repeat, outer_fold=outer_fold).items()]
    if metric is not None:
        where.append(s.c.metric == metric)
    query = (select(s.c.repeat, s.c.outer_fold, s.c.inner_fold, *_score_columns(s))
             .where(s.c.assessment_id == row.id, *where).order_by(s.c.position))
    frame = pd.read_sql(query, connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                  "inner_fold": "int64"} | _SCORES)
    return _name_configs(connection, row, frame)[frames.INNER_COLUMNS]


def outer_frame(connection: Connection, row: Row, *, metric: str | None = None, winners: str | None = None,
                configs: Sequence[str] = ()) -> pd.DataFrame:
    s, o = tables.outer_scores, tables.outer_folds
    where = [] if metric is None else [s.c.metric == _metric_position(row, metric)]
    if winners is not None:
        chosen = _chosen(s, row, winners)
        where.append(or_(chosen, _among(s, row, configs)) if configs else chosen)
    query = (select(s.c.repeat, s.c.outer_fold, *_score_columns(s), o.c.n_train, o.c.n_test)
             .join(o, and_(o.c.assessment_id == s.c.assessment_id, o.c.repeat == s.c.repeat,
                           o.c.outer_fold == s.c.outer_fold))
             .where(s.c.assessment_id == row.id, *where).order_by(s.c.position))
    frame = pd.read_sql(query, connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                  "n_train": "int64", "n_test": "int64"} | _SCORES)
    keys = pd.MultiIndex.from_arrays([frame["repeat"], frame["outer_fold"], frame["config"]])
    ch = tables.fold_choices
    choices = connection.execute(select(ch.c.kind, ch.c.repeat, ch.c.outer_fold, ch.c.config)
                                 .where(ch.c.assessment_id == row.id)).all()
    for kind in ("family", "overall"):
        chosen = [(r, o, c) for k, r, o, c in choices if k == kind]
        frame[f"{kind}_winner"] = keys.isin(chosen) if chosen else np.zeros(len(frame), dtype=bool)
    return _name_configs(connection, row, frame)[frames.OUTER_COLUMNS]


def _winners(engine: Engine, uuid: str, *, kind: str, metric: str | None) -> pd.DataFrame:
    """``frames.winners_frame`` without reading the inner scores: the chosen outer scores in payload
    order beside the stored inner summaries of the same fold, configuration and metric."""
    o, summary = tables.outer_scores, tables.inner_summaries
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        same = [summary.c[name] == o.c[name] for name in ("assessment_id", "repeat", "outer_fold", "config",
                                                          "metric")]
        query = (select(o.c.repeat, o.c.outer_fold, o.c.config, o.c.metric, summary.c.inner_mean,
                        summary.c.inner_std, o.c.score.label("outer_score"))
                 .outerjoin(summary, and_(*same))
                 .where(o.c.assessment_id == row.id, o.c.metric == _metric_position(row, metric),
                        _chosen(o, row, kind))
                 .order_by(o.c.position))
        frame = pd.read_sql(query, connection, dtype={"repeat": "int64", "outer_fold": "int64",
                                                      "inner_mean": "float64", "inner_std": "float64",
                                                      "outer_score": "float64"})
        frame = _name_configs(connection, row, frame)
    frame["optimism"] = frame["inner_mean"] - frame["outer_score"]
    order = ["repeat", "outer_fold"] if kind == "overall" else ["repeat", "outer_fold", "family"]
    return frame.sort_values(order, kind="stable").reset_index(drop=True)[frames.WINNER_COLUMNS]


def _chosen(table: Table, row: Row, kind: str):
    """Rows of ``table`` whose (repeat, outer_fold, config) is a fold winner of ``kind`` (or of either)."""
    if kind not in ("family", "overall", "either"):
        raise ValueError(f"winners must be 'family', 'overall' or 'either' (or None for every row); "
                         f"received {kind!r}")
    ch = tables.fold_choices
    chosen = select(ch.c.repeat, ch.c.outer_fold, ch.c.config).where(ch.c.assessment_id == row.id)
    if kind != "either":
        chosen = chosen.where(ch.c.kind == kind)
    return tuple_(table.c.repeat, table.c.outer_fold, table.c.config).in_(chosen)


def _among(table: Table, row: Row, configs: Sequence[str]):
    """Rows of ``table`` of the configurations with these ids."""
    c = tables.configurations
    return table.c.config.in_(select(c.c.position).where(c.c.assessment_id == row.id,
                                                         c.c.config_id.in_(list(configs))))


def _metric_position(row: Row, metric: str | None) -> int:
    """The position of ``metric`` in the design's metrics; the selection metric's (0) when None."""
    metrics = row.design["metrics"]
    if metric is None:
        return 0
    if metric not in metrics:
        raise ValueError(f"metric {metric!r} was not recorded in assessment {row.uuid}; choose one of "
                         f"{metrics}")
    return metrics.index(metric)


def _score_columns(table: Table) -> list:
    return [table.c.config, table.c.metric, table.c.score, table.c.fit_time, table.c.score_time]


def _fold_filter(row: Row, *, repeat: int | None, outer_fold: int | None) -> dict[str, int]:
    chosen = {"repeat": (repeat, row.n_repeats), "outer_fold": (outer_fold, row.n_outer_folds)}
    for name, (value, size) in chosen.items():
        if value is not None and not (isinstance(value, int | np.integer) and 0 <= value < size):
            raise ValueError(f"{name} must be an integer in 0..{size - 1} for assessment {row.uuid}; "
                             f"received {value!r}")
    return {name: int(value) for name, (value, _) in chosen.items() if value is not None}


def _name_configs(connection: Connection, row: Row, frame: pd.DataFrame) -> pd.DataFrame:
    """Config and metric positions replaced by family, config id, params and metric name."""
    configs = configurations_of(connection, row.id)
    ids, families, params = (np.empty(len(configs), dtype=object) for _ in range(3))
    for position, config in enumerate(configs):
        ids[position], families[position], params[position] = config.id, config.family, config.params
    positions = frame["config"].to_numpy(dtype=np.int64)
    frame["family"], frame["config"], frame["params"] = families[positions], ids[positions], params[positions]
    metrics = np.array(Design.model_validate(row.design).metrics, dtype=object)
    frame["metric"] = metrics[frame["metric"].to_numpy(dtype=np.int64)]
    return frame


def _nan_for_none(value: float | None) -> float:
    return float("nan") if value is None else value
