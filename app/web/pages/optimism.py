"""Optimism: the fold winners' inner mean against their outer score, and how well inner ranks carry over."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Literal

import pandas as pd
from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.stats.agreement import rank_agreement
from foldwise.stats.summaries import ScoreSummary, optimism_summary, score_summary
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.optimism import optimism_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours, family_symbols
from foldwise.web.winner_rows import FoldWinner, fold_winner_rows

router = APIRouter()

AGREEMENT_NEEDS_REFIT_ALL = ("Rank agreement needs every configuration's outer score, which exists only when "
                             "every configuration is refit on each outer fold (refit_all); this assessment "
                             "refit the family winners only.")
AGREEMENT_NEEDS_THREE = "Rank agreement needs at least 3 configurations; this assessment has {n}."


@dataclass(frozen=True)
class OptimismRow:
    """The optimism (inner mean − outer score) of one set of fold winners over the outer folds: its summary
    (optimism_summary's fields, NaN where undefined)."""

    label: str
    family: str | None  # None for the overall fold winners
    n: int
    n_missing: int
    mean: float
    sd: float
    min: float
    max: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class FoldAgreement:
    """How well the inner ranks of every configuration carry over to the outer scores on one outer fold
    (rank_agreement's fields; NaN coefficients and the reason in ``note`` when it cannot be computed)."""

    repeat: int
    outer_fold: int
    spearman_rho: float
    spearman_p: float
    kendall_tau: float
    kendall_p: float
    n: int
    n_missing: int
    note: str


@dataclass(frozen=True)
class CoefficientMean:
    """A rank coefficient's mean over the outer folds where it is defined, and over how many."""

    mean: float
    n: int
    n_missing: int


@dataclass(frozen=True)
class OptimismContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    level: str  # "overall" or "family": which fold winners are plotted
    families: list[str]
    colours: dict[str, str]
    points: list[FoldWinner]  # the plotted fold winners (overall, or every family's), one per outer fold each
    summaries: list[OptimismRow]  # the overall winners first
    agreement: list[FoldAgreement]  # one per outer fold, empty when agreement_message says why
    agreement_mean: dict[str, CoefficientMean]  # "spearman_rho", "kendall_tau": only those defined on some fold
    agreement_message: str  # why no agreement is shown, or ""
    optimism_figure: str


def optimism_context(reader: AssessmentReader, *, metric: str | None, level: str = "overall") -> OptimismContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    overall = reader.winners(kind="overall", metric=metric)
    per_family = reader.winners(kind="family", metric=metric)
    families = [family.name for family in record.families]
    summaries = [OptimismRow("overall winner", None, **asdict(_optimism(overall)))]
    if level == "family":
        summaries += [OptimismRow(family, family, **asdict(_optimism(per_family[per_family["family"] == family])))
                      for family in families]
    agreement, message = [], ""
    if not record.design.refit_all:
        message = AGREEMENT_NEEDS_REFIT_ALL
    elif len(record.configurations) < 3:
        message = AGREEMENT_NEEDS_THREE.format(n=len(record.configurations))
    else:
        # Every configuration's inner mean against its outer score: only this needs all inner scores.
        inner, outer = reader.inner(metric=metric), reader.outer(metric=metric)
        every = frames.winners_frame(inner, outer.assign(every=True), metric, flag="every")
        agreement = [_agreement(int(repeat), int(outer_fold), fold)
                     for (repeat, outer_fold), fold in every.groupby(["repeat", "outer_fold"])]
    colours = family_colours(families)
    points = fold_winner_rows(overall if level == "overall" else per_family)
    return OptimismContext(
        record=record, metric=metric, metrics=record.design.metrics, level=level, families=families,
        colours=colours, points=points, summaries=summaries, agreement=agreement,
        agreement_mean=_agreement_mean(agreement), agreement_message=message,
        optimism_figure=optimism_figure(points, colours, family_symbols(families), metric=metric))


def _optimism(winners: pd.DataFrame) -> ScoreSummary:
    complete = winners["inner_mean"].notna() & winners["outer_score"].notna()
    if not complete.any():
        return ScoreSummary(n=0, n_missing=len(winners), **dict.fromkeys(
            ("mean", "sd", "min", "max", "ci_low", "ci_high"), math.nan))
    return optimism_summary(winners["inner_mean"].to_numpy(dtype=float),
                            winners["outer_score"].to_numpy(dtype=float))


def _agreement(repeat: int, outer_fold: int, fold: pd.DataFrame) -> FoldAgreement:
    try:
        result = rank_agreement(fold["inner_mean"].to_numpy(dtype=float),
                                fold["outer_score"].to_numpy(dtype=float))
    except ValueError as error:  # fewer than 3 configurations left with both scores in this fold
        n = int((fold["inner_mean"].notna() & fold["outer_score"].notna()).sum())
        return FoldAgreement(repeat, outer_fold, spearman_rho=math.nan, spearman_p=math.nan, kendall_tau=math.nan,
                             kendall_p=math.nan, n=n, n_missing=len(fold) - n, note=str(error))
    return FoldAgreement(repeat, outer_fold, **asdict(result))


def _agreement_mean(agreement: list[FoldAgreement]) -> dict[str, CoefficientMean]:
    """Mean of each coefficient over the outer folds where it is defined, and over how many."""
    means = {}
    for name in ("spearman_rho", "kendall_tau"):
        values = pd.Series([getattr(row, name) for row in agreement], dtype=float)
        if values.notna().any():
            summary = score_summary(values.to_numpy())
            means[name] = CoefficientMean(mean=summary.mean, n=summary.n, n_missing=summary.n_missing)
    return means


@router.get("/assessments/{uuid}/optimism", name="optimism", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def optimism(request: Request, reader: ReaderDep, metric: str | None = None,
             level: Literal["overall", "family"] = "overall"):
    return form_page(request, "optimism.html", lambda metric: optimism_context(reader, metric=metric, level=level),
                     {"metric": metric})


@router.get("/api/assessments/{uuid}/optimism", name="optimism_json", response_model=context_model(OptimismContext),
            responses=error_responses(404, 422))
def optimism_json(reader: ReaderDep, metric: str | None = None,
                  level: Literal["overall", "family"] = "overall"):
    return context_json(optimism_context(reader, metric=metric, level=level))
