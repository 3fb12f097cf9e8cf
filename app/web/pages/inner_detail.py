"""Inner detail: one outer fold's configurations × inner folds, their scores, fit times and failed fits."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.inner import inner_heatmap_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses, refusal
from foldwise.web.failed_fits import FoldFailure, fold_failures
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.query import FoldNumber
from foldwise.web.serialise import plain

router = APIRouter()


@dataclass(frozen=True)
class ConfigRow:
    config: str
    family: str
    params: dict
    scores: list[float | None]  # per inner fold, None for a failed fit
    fit_times: list[float | None]  # seconds per inner fold
    inner_mean: float | None  # mean over the inner folds; None when one failed (it could not win)
    inner_std: float | None  # population sd, as scikit-learn's std_test_score
    mean_fit_time: float | None
    outer_score: float | None  # refit on the outer training set, scored on its test fold
    family_winner: bool
    overall_winner: bool


@dataclass(frozen=True)
class FoldRef:
    """An outer fold to link to."""

    repeat: int
    outer_fold: int


@dataclass(frozen=True)
class InnerDetailContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    repeat: int
    outer_fold: int
    n_train: int | None
    n_test: int | None
    inner_folds: list[int]
    families: list[str]
    colours: dict[str, str]
    configs: list[ConfigRow]  # grouped by family in the assessment's order, grid order within
    failures: list[FoldFailure]  # this outer fold's failed fits
    previous_fold: FoldRef | None  # None at the first outer fold
    next_fold: FoldRef | None  # None at the last
    scores_figure: str
    fit_times_figure: str


def inner_detail_context(reader: AssessmentReader, *, repeat: int = 0, outer_fold: int = 0,
                         metric: str | None = None) -> InnerDetailContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    design = record.design
    for name, value, size in (("repeat", repeat, design.n_repeats),
                              ("outer_fold", outer_fold, design.n_outer_folds)):
        if not 0 <= value < size:
            raise refusal(422, f"{name} {value} is not in this assessment: choose 0..{size - 1}",
                          loc=["query", name])
    inner = reader.inner(metric=metric, repeat=repeat, outer_fold=outer_fold)
    outer = reader.outer(metric=metric, repeat=repeat, outer_fold=outer_fold)
    families = [family.name for family in record.families]
    order = {family: position for position, family in enumerate(families)}
    configurations = sorted(record.configurations, key=lambda c: order[c.family])  # stable: grid order kept
    inner_folds = list(range(design.n_inner_folds))
    configs = [_row(c, inner[inner["config"] == c.id], outer[outer["config"] == c.id], inner_folds)
               for c in configurations]
    failures = reader.failures(repeat=repeat, outer_fold=outer_fold)
    folds = [FoldRef(r, o) for r in range(design.n_repeats) for o in range(design.n_outer_folds)]
    here = folds.index(FoldRef(repeat, outer_fold))
    colours = family_colours(families)
    return InnerDetailContext(
        record=record, metric=metric, metrics=design.metrics, repeat=repeat, outer_fold=outer_fold,
        n_train=plain(outer["n_train"].iloc[0]) if len(outer) else None,
        n_test=plain(outer["n_test"].iloc[0]) if len(outer) else None, inner_folds=inner_folds,
        families=families, colours=colours, configs=configs,
        failures=fold_failures(failures),
        previous_fold=folds[here - 1] if here > 0 else None,
        next_fold=folds[here + 1] if here + 1 < len(folds) else None,
        scores_figure=inner_heatmap_figure(configs, colours, value="scores", metric=metric),
        fit_times_figure=inner_heatmap_figure(configs, colours, value="fit_times", metric=metric))


def _row(config, inner: pd.DataFrame, outer: pd.DataFrame, inner_folds: list[int]) -> ConfigRow:
    by_fold = inner.set_index("inner_fold").reindex(inner_folds)
    scores = by_fold["score"].to_numpy(dtype=float)
    complete = not np.isnan(scores).any()
    return ConfigRow(
        config=config.id, family=config.family, params=config.params,
        scores=[plain(value) for value in scores], fit_times=[plain(value) for value in by_fold["fit_time"]],
        inner_mean=plain(np.mean(scores)) if complete else None,
        inner_std=plain(np.std(scores)) if complete else None,
        mean_fit_time=plain(by_fold["fit_time"].mean()),
        outer_score=plain(outer["score"].iloc[0]) if len(outer) else None,
        family_winner=bool(outer["family_winner"].any()), overall_winner=bool(outer["overall_winner"].any()))


@router.get("/assessments/{uuid}/inner", name="inner_detail", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def inner_detail(request: Request, reader: ReaderDep, repeat: FoldNumber = 0, outer_fold: FoldNumber = 0,
                 metric: str | None = None):
    def build(repeat, outer_fold, metric):
        return inner_detail_context(reader, repeat=repeat, outer_fold=outer_fold, metric=metric)

    return form_page(request, "inner_detail.html", build,
                     {"repeat": repeat, "outer_fold": outer_fold, "metric": metric}, {"repeat": 0, "outer_fold": 0})


@router.get("/api/assessments/{uuid}/inner", name="inner_detail_json", response_model=context_model(InnerDetailContext),
            responses=error_responses(404, 422))
def inner_detail_json(reader: ReaderDep, repeat: FoldNumber = 0, outer_fold: FoldNumber = 0,
                      metric: str | None = None):
    return context_json(inner_detail_context(reader, repeat=repeat, outer_fold=outer_fold, metric=metric))
