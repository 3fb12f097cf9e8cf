"""Score distributions: the outer scores of each family's fold winners (or of every configuration)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Annotated, Any, Literal

import pandas as pd
from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from foldwise.definitions import HEADLINE_LEVEL, HEADLINE_METHOD, headline_interval
from foldwise.stats.summaries import score_summary
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.distributions import distribution_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses, refusal
from foldwise.web.formatting import params_text
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours, family_symbols

router = APIRouter()

CONFIG_VIEW_NEEDS_REFIT_ALL = ("Per-configuration outer scores exist only when every configuration is refit "
                               "on each outer fold (refit_all); this assessment refit the family winners "
                               "only, so families are shown.")


By = Literal["family", "config"]
Sort = Literal["mean", "name"]
Families = Annotated[list[str] | None, Query()]  # repeated (families=a&families=b) or comma-separated


@dataclass(frozen=True)
class GroupSummary:
    """A row's outer scores summarised over the outer folds; NaN where a number is undefined."""

    n: int  # outer folds with a score
    n_missing: int
    mean: float
    sd: float
    min: float
    max: float
    interval_low: float  # the headline interval (definitions.headline_interval)
    interval_high: float
    spread_low: float  # the plain t interval, a description of the spread; NaN when the outer loop was repeated
    spread_high: float


@dataclass(frozen=True)
class ScorePoint:
    """One outer score of a row: a fold winner's (its params vary by fold) or one configuration's."""

    repeat: int
    outer_fold: int
    score: float  # NaN for a failed fit
    params: dict[str, Any]


@dataclass(frozen=True)
class ScoreGroup:
    """One box of the chart and one row of the table: a family's fold winners, or one configuration."""

    label: str
    family: str
    config: str | None  # None for a family's fold winners
    params: dict | None
    summary: GroupSummary
    points: list[ScorePoint]


@dataclass(frozen=True)
class DistributionsContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    by: str  # what is shown: "family" or "config"
    sort: str
    families: list[str]  # every family, in the assessment's order
    selected: list[str]  # the families shown
    colours: dict[str, str]
    overall: GroupSummary  # the nested estimate: the overall winners' outer scores
    interval_method: str  # definitions.HEADLINE_METHOD, the interval of every row
    interval_level: float
    spread_shown: bool  # the plain t spread is shown: the outer loop was not repeated
    family_groups: list[ScoreGroup]  # sorted as asked
    config_groups: list[ScoreGroup]  # by family (family_groups' order), then as asked; empty unless by=config
    message: str  # why the per-configuration view is not shown, or ""
    distributions_figure: str


def score_distributions_context(reader: AssessmentReader, *, metric: str | None, by: str = "family",
                                sort: str = "mean", families: list[str] | None = None
                                ) -> DistributionsContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    names = [family.name for family in record.families]
    selected = _chosen_families(names, families)
    message = ""
    if by == "config" and not record.design.refit_all:
        by, message = "family", CONFIG_VIEW_NEEDS_REFIT_ALL
    # The family view needs the fold winners' rows only; the configuration view every row of the metric.
    outer = reader.outer(metric=metric, winners=None if by == "config" else "either")
    sizes = reader.fold_sizes()
    folds = sizes.index
    shape = _Shape(sizes=sizes, repeated=record.design.n_repeats > 1)
    winners = outer[outer["family_winner"]]
    family_groups = [_group(family, family, None, None, winners[winners["family"] == family], folds, shape)
                     for family in selected]
    family_groups = _sorted(family_groups, sort, key=lambda group: group.family.lower())
    config_groups: list[ScoreGroup] = []
    if by == "config":
        for family_group in family_groups:
            configs = [c for c in record.configurations if c.family == family_group.family]
            mine = [_group(f"{c.family}: {params_text(c.params)}", c.family, c.id, c.params,
                           outer[outer["config"] == c.id], folds, shape) for c in configs]
            position = {c.id: i for i, c in enumerate(configs)}
            config_groups += _sorted(mine, sort, key=lambda group: position[group.config])
    colours = family_colours(names)
    overall = _summary(_by_fold(outer[outer["overall_winner"]], folds), shape)
    shown = config_groups if by == "config" else family_groups
    return DistributionsContext(
        record=record, metric=metric, metrics=record.design.metrics, by=by, sort=sort, families=names,
        selected=selected, colours=colours, overall=overall, interval_method=HEADLINE_METHOD,
        interval_level=HEADLINE_LEVEL, spread_shown=not shape.repeated, family_groups=family_groups,
        config_groups=config_groups, message=message,
        distributions_figure=distribution_figure(shown, colours, family_symbols(names), metric=metric))


def _chosen_families(names: list[str], asked: list[str] | None) -> list[str]:
    """Families named in the query (repeated or comma-separated), in the assessment's order; all when none."""
    if not asked:
        return names
    wanted = set()
    for value in asked:
        wanted |= {value} if value in names else {part.strip() for part in value.split(",") if part.strip()}
    unknown = sorted(wanted - set(names))
    if unknown:
        raise refusal(422, f"families {', '.join(unknown)} are not in this assessment; choose from "
                           f"{', '.join(names)}", loc=["query", "families"])
    return [name for name in names if name in wanted] or names


@dataclass(frozen=True)
class _Shape:
    """What every row's summary needs of the design: fold sizes (for the interval) and whether it repeats."""

    sizes: pd.DataFrame  # n_train, n_test per fold, in the folds' order
    repeated: bool


def _group(label, family, config, params, rows: pd.DataFrame, folds: pd.MultiIndex, shape: _Shape) -> ScoreGroup:
    points = [ScorePoint(repeat=int(row["repeat"]), outer_fold=int(row["outer_fold"]), score=float(row["score"]),
                         params=row["params"])
              for row in rows[["repeat", "outer_fold", "score", "params"]].to_dict(orient="records")]
    return ScoreGroup(label=label, family=family, config=config, params=params,
                      summary=_summary(_by_fold(rows, folds), shape), points=points)


def _by_fold(rows: pd.DataFrame, folds: pd.MultiIndex) -> pd.Series:
    # A fold where the family had no winner (every configuration failed) counts as missing.
    return rows.set_index(["repeat", "outer_fold"])["score"].reindex(folds)


def _summary(scores: pd.Series, shape: _Shape) -> GroupSummary:
    if not scores.notna().any():
        return GroupSummary(0, int(scores.size), *[math.nan] * 8)
    values = scores.to_numpy(dtype=float)
    summary = score_summary(values)
    interval = headline_interval(values, n_train=shape.sizes["n_train"].to_numpy(dtype=float),
                                 n_test=shape.sizes["n_test"].to_numpy(dtype=float))
    # The plain t treats the folds as independent: a description of their spread, and with repeats not even that.
    spread = (math.nan, math.nan) if shape.repeated else (summary.ci_low, summary.ci_high)
    return GroupSummary(n=summary.n, n_missing=summary.n_missing, mean=summary.mean, sd=summary.sd,
                        min=summary.min, max=summary.max, interval_low=interval.low, interval_high=interval.high,
                        spread_low=spread[0], spread_high=spread[1])


def _sorted(groups: list[ScoreGroup], sort: str, *, key) -> list[ScoreGroup]:
    if sort == "name":
        return sorted(groups, key=key)
    # Best mean first; groups without a score go last, in their given order.
    return sorted(groups, key=lambda group: (math.isnan(group.summary.mean),
                                             0.0 if math.isnan(group.summary.mean) else -group.summary.mean))


@router.get("/assessments/{uuid}/distributions", name="score_distributions", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def score_distributions(request: Request, reader: ReaderDep, metric: str | None = None, by: By = "family",
                        sort: Sort = "mean", families: Families = None):
    def build(metric, families):
        return score_distributions_context(reader, metric=metric, by=by, sort=sort, families=families)

    return form_page(request, "score_distributions.html", build, {"metric": metric, "families": families})


@router.get("/api/assessments/{uuid}/distributions", name="score_distributions_json",
            response_model=context_model(DistributionsContext),
            responses=error_responses(404, 422))
def score_distributions_json(reader: ReaderDep, metric: str | None = None, by: By = "family",
                             sort: Sort = "mean", families: Families = None):
    return context_json(score_distributions_context(reader, metric=metric, by=by, sort=sort,
                                                    families=families))
