"""The index of stored assessments and one assessment's record; its scores are read by ``store.reader``."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

import pandas as pd
from sqlalchemy import Connection, Engine, Row, select

from foldwise.definitions import HEADLINE_LEVEL, HEADLINE_METHOD, NestedEstimate
from foldwise.payload import Configuration, Design, Family
from foldwise.stats.intervals import Interval
from foldwise.store import tables
from foldwise.store.lookup import created_at_of

INDEX_COLUMNS = ["uuid", "name", "dataset", "created_at", "task", "n_repeats", "n_outer_folds",
                 "n_inner_folds", "n_configs", "families", "selection_metric", "estimate_mean", "estimate_sd",
                 "estimate_n_used", "estimate_n_folds", "estimate_low", "estimate_high"]
FAILURE_COLUMNS = ["level", "repeat", "outer_fold", "inner_fold", "family", "config", "metric", "stage", "message"]


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
    with engine.connect() as connection:
        return assessment_index(connection, dataset=dataset, name=name)


def assessment_index(connection: Connection, *, dataset: str | None = None, name: str | None = None
                     ) -> pd.DataFrame:
    """``list_assessments`` on an open connection."""
    a = tables.assessments
    where = [column.icontains(text, autoescape=True)
             for column, text in ((a.c.dataset, dataset), (a.c.name, name)) if text]
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


def _nan_for_none(value: float | None) -> float:
    return float("nan") if value is None else value
