"""Score distributions: the outer scores of each family's fold winners (or of every configuration)."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Annotated, Literal

import pandas as pd
from fastapi import APIRouter, HTTPException, Query, Request
from fastapi.responses import HTMLResponse

from foldwise.stats.summaries import score_summary
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.distributions import distribution_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses
from foldwise.web.formatting import params_text
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.serialise import plain, records

router = APIRouter()

CONFIG_VIEW_NEEDS_REFIT_ALL = ("Per-configuration outer scores exist only when every configuration is refit "
                               "on each outer fold (refit_all); this assessment refit the family winners "
                               "only, so families are shown.")


By = Literal["family", "config"]
Sort = Literal["mean", "name"]
Families = Annotated[list[str] | None, Query()]  # repeated (families=a&families=b) or comma-separated


@dataclass(frozen=True)
class ShownSummary:
    """``stats.summaries.ScoreSummary`` as the page shows it: None where a number is undefined."""

    n: int
    n_missing: int
    mean: float | None
    sd: float | None
    min: float | None
    max: float | None
    ci_low: float | None
    ci_high: float | None


@dataclass(frozen=True)
class ScoreGroup:
    """One box of the chart and one row of the table: a family's fold winners, or one configuration."""

    label: str
    family: str
    config: str | None  # None for a family's fold winners
    params: dict | None
    summary: ShownSummary
    points: list[dict]  # repeat, outer_fold, score, params


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
    overall: ShownSummary  # the nested estimate: summary of the overall winners' outer scores
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
    folds = reader.fold_sizes().index
    winners = outer[outer["family_winner"]]
    family_groups = [_group(family, family, None, None, winners[winners["family"] == family], folds)
                     for family in selected]
    family_groups = _sorted(family_groups, sort, key=lambda group: group.family.lower())
    config_groups: list[ScoreGroup] = []
    if by == "config":
        for family_group in family_groups:
            configs = [c for c in record.configurations if c.family == family_group.family]
            mine = [_group(f"{c.family}: {params_text(c.params)}", c.family, c.id, c.params,
                           outer[outer["config"] == c.id], folds) for c in configs]
            position = {c.id: i for i, c in enumerate(configs)}
            config_groups += _sorted(mine, sort, key=lambda group: position[group.config])
    colours = family_colours(names)
    overall = _summary(_by_fold(outer[outer["overall_winner"]], folds))
    shown = config_groups if by == "config" else family_groups
    return DistributionsContext(
        record=record, metric=metric, metrics=record.design.metrics, by=by, sort=sort, families=names,
        selected=selected, colours=colours, overall=overall, family_groups=family_groups,
        config_groups=config_groups, message=message,
        distributions_figure=distribution_figure(shown, colours, metric=metric))


def _chosen_families(names: list[str], asked: list[str] | None) -> list[str]:
    """Families named in the query (repeated or comma-separated), in the assessment's order; all when none."""
    if not asked:
        return names
    wanted = set()
    for value in asked:
        wanted |= {value} if value in names else {part.strip() for part in value.split(",") if part.strip()}
    unknown = sorted(wanted - set(names))
    if unknown:
        raise HTTPException(422, f"families {unknown} are not in this assessment; choose from {names}")
    return [name for name in names if name in wanted] or names


def _group(label, family, config, params, rows: pd.DataFrame, folds: pd.MultiIndex) -> ScoreGroup:
    points = records(rows[["repeat", "outer_fold", "score", "params"]])
    return ScoreGroup(label=label, family=family, config=config, params=params,
                      summary=_summary(_by_fold(rows, folds)), points=points)


def _by_fold(rows: pd.DataFrame, folds: pd.MultiIndex) -> pd.Series:
    # A fold where the family had no winner (every configuration failed) counts as missing.
    return rows.set_index(["repeat", "outer_fold"])["score"].reindex(folds)


def _summary(scores: pd.Series) -> ShownSummary:
    if not scores.notna().any():
        return ShownSummary(n=0, n_missing=int(scores.size), mean=None, sd=None, min=None, max=None, ci_low=None,
                            ci_high=None)
    return ShownSummary(**{name: plain(value)
                           for name, value in asdict(score_summary(scores.to_numpy(dtype=float))).items()})


def _sorted(groups: list[ScoreGroup], sort: str, *, key) -> list[ScoreGroup]:
    if sort == "name":
        return sorted(groups, key=key)
    # Best mean first; groups without a score go last, in their given order.
    return sorted(groups, key=lambda group: (group.summary.mean is None, -(group.summary.mean or 0.0)))


@router.get("/assessments/{uuid}/distributions", name="score_distributions", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def score_distributions(request: Request, reader: ReaderDep, metric: str | None = None, by: By = "family",
                        sort: Sort = "mean", families: Families = None):
    context = score_distributions_context(reader, metric=metric, by=by, sort=sort, families=families)
    templates = request.app.state.templates
    return templates.TemplateResponse(request, "score_distributions.html", {"page": context})


@router.get("/api/assessments/{uuid}/distributions", name="score_distributions_json",
            response_model=context_model(DistributionsContext),
            responses=error_responses(404, 422))
def score_distributions_json(reader: ReaderDep, metric: str | None = None, by: By = "family",
                             sort: Sort = "mean", families: Families = None):
    return context_json(score_distributions_context(reader, metric=metric, by=by, sort=sort,
                                                    families=families))
