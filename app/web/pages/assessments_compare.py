"""Two assessments side by side: paired fold by fold when their outer folds match, else summaries only."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Annotated

import numpy as np
import pandas as pd
from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.definitions import nested_estimate
from foldwise.stats.paired import PairedResult, compare_paired
from foldwise.store import AssessmentReader, AssessmentRecord, StoreReader
from foldwise.web.answers import AssessmentsComparison
from foldwise.web.charts.comparison import intervals_figure, paired_strips_figure
from foldwise.web.context_json import context_json
from foldwise.web.errors import error_responses, refusal
from foldwise.web.fold_scores import FoldPair, family_fold_scores, fold_pairs, overall_fold_scores
from foldwise.web.forms import form_page, rope_from
from foldwise.web.listing import ListedAssessment, listed_fields
from foldwise.web.lookup import StoreDep, assessment_or_404
from foldwise.web.palette import family_colours
from foldwise.web.query import ROPE_TEXT, Rope

router = APIRouter()

SELECTION = "overall fold winners"  # the candidate that stands for the whole selection procedure


@dataclass(frozen=True)
class Side:
    """One assessment's outer scores, laid out per outer fold."""

    record: AssessmentRecord
    families: pd.DataFrame  # one column per family: its fold winners' outer scores
    overall: pd.Series  # the overall fold winners' outer scores
    sizes: pd.DataFrame  # n_train, n_test per outer fold
    best: str | None  # the family with the best mean outer score


@dataclass(frozen=True)
class Choosable(ListedAssessment):
    fingerprint: str  # equal for two assessments exactly when their outer folds can be paired


@dataclass(frozen=True)
class CandidatePairing:
    """One candidate of x against its counterpart in y, paired outer fold by outer fold."""

    kind: str  # "selection procedure", "best family" or "family"
    label: str
    x: str  # the candidate in x: a family, or the overall fold winners
    y: str
    result: PairedResult | None  # None when the pair cannot be compared; error says why
    error: str | None
    folds: list[FoldPair]  # a is x's score, b is y's


@dataclass(frozen=True)
class CandidateSummary:
    """One candidate's outer scores in one assessment: mean, sd and the headline interval (NaN where undefined)."""

    n: int  # outer folds scored
    n_missing: int
    mean: float
    sd: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class CandidateSummaries:
    """One candidate (the selection procedure or a family) in x and in y, each on its own."""

    candidate: str
    kind: str  # "selection procedure" or "family"
    x: CandidateSummary | None  # None when the candidate is not in that assessment
    y: CandidateSummary | None


@dataclass(frozen=True)
class AssessmentsCompareContext:
    assessments: list[Choosable]  # every stored assessment, newest first, for the two selects
    x_choice: str  # what the selects show: the requested uuids, else a pair whose outer folds match
    y_choice: str
    x: AssessmentRecord | None
    y: AssessmentRecord | None
    metric: str | None
    metrics: list[str]  # metrics recorded in both
    rope: float
    paired: bool
    reason: str  # why the folds cannot be paired; empty when they can
    comparisons: list[CandidatePairing]
    summaries: list[CandidateSummaries]  # the selection procedure first
    differences_figure: str | None
    intervals_figure: str | None


def assessments_compare_context(store: StoreReader, *, x: str | None, y: str | None, metric: str | None,
                                rope: float) -> AssessmentsCompareContext:
    if not (math.isfinite(rope) and rope >= 0):
        raise refusal(422, f"the ROPE is a half-width in score units, a number of 0 or more (e.g. 0.01); "
                           f"got {rope!r}", loc=["query", "rope"])
    fingerprints = store.fingerprints()
    listing = [Choosable(**listed_fields(row), fingerprint=fingerprints.get(row["uuid"], ""))
               for row in store.assessments().to_dict(orient="records")]
    if not (x and y):
        x, y = _proposed(listing, x or None, y or None)
        return AssessmentsCompareContext(listing, x, y, None, None, None, [], rope, False, "", [], [],
                                         None, None)
    x_reader, y_reader = (assessment_or_404(store, uuid, loc=("query", name)) for name, uuid in (("x", x), ("y", y)))
    first, second = x_reader.record, y_reader.record
    metrics = [m for m in first.design.metrics if m in second.design.metrics]
    metric = _common_metric(first, second, metric, metrics)
    left, right = _side(x_reader, metric), _side(y_reader, metric)
    reason = _unpaired_reason(first, second)
    comparisons = [] if reason else _comparisons(left, right, rope=rope)
    summaries = _summaries(left, right)
    families = list(dict.fromkeys([f.name for f in first.families] + [f.name for f in second.families]))
    return AssessmentsCompareContext(
        assessments=listing, x_choice=first.uuid, y_choice=second.uuid, x=first, y=second, metric=metric,
        metrics=metrics, rope=rope, paired=not reason, reason=reason, comparisons=comparisons,
        summaries=summaries,
        differences_figure=paired_strips_figure(comparisons, rope=rope, metric=metric) if comparisons else None,
        intervals_figure=intervals_figure(summaries, colours=family_colours(families), metric=metric))

@router.get("/compare", name="assessments_compare", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def assessments_compare(request: Request, store: StoreDep, x: str | None = None, y: str | None = None,
                        metric: str | None = None, rope: str | None = Query(None, description=ROPE_TEXT)):
    # The form keeps its place: an assessment, metric or ROPE the page cannot use is named beside its field.
    def build(x, y, metric, rope):
        return assessments_compare_context(store, x=x, y=y, metric=metric, rope=rope_from(rope))

    return form_page(request, "assessments_compare.html", build, {"x": x, "y": y, "metric": metric, "rope": rope})


@router.get("/api/compare", name="assessments_compare_json", response_model=AssessmentsComparison,
            responses=error_responses(404, 422))
def assessments_compare_json(store: StoreDep, x: Annotated[str, Query(min_length=1)],
                             y: Annotated[str, Query(min_length=1)],
                             metric: str | None = None, rope: Rope = 0.01):
    """Two assessments: paired tests family by family when their outer folds match, else summaries."""
    page = assessments_compare_context(store, x=x, y=y, metric=metric, rope=rope)
    return {"x": page.x.uuid, "y": page.y.uuid, "metric": page.metric, "rope": page.rope,
            "paired": page.paired, "reason": page.reason or None,
            "fingerprints": {"x": page.x.fingerprint, "y": page.y.fingerprint},
            "comparisons": [context_json(pairing) for pairing in page.comparisons],
            "summaries": [context_json(row) for row in page.summaries]}


def _proposed(listing: list[Choosable], x: str | None, y: str | None) -> tuple[str, str]:
    """The pair the selects offer when one or both are unset: first one whose outer folds match (newest
    first), else the newest other assessment."""
    uuids = [row.uuid for row in listing]
    prints = {row.uuid: row.fingerprint for row in listing}

    def partner(of: str, other: str | None) -> str:
        others = [uuid for uuid in uuids if uuid != of]
        if other:
            return other
        return next((uuid for uuid in others if prints[uuid] == prints.get(of)), next(iter(others), ""))

    if x is None and y is None:
        x = next((uuid for uuid in uuids if any(prints[o] == prints[uuid] for o in uuids if o != uuid)),
                 next(iter(uuids), ""))
    if x is None:
        return partner(y, None), y
    return x, partner(x, y)


def _common_metric(x: AssessmentRecord, y: AssessmentRecord, metric: str | None, common: list[str]) -> str:
    if not common:
        raise refusal(422, f"x and y share no metric (x recorded {', '.join(x.design.metrics)}; y recorded "
                           f"{', '.join(y.design.metrics)}): choose a y scored on one of x's metrics",
                      loc=["query", "y"])
    if metric is None:
        return common[0]
    if metric not in common:
        raise refusal(422, f"metric {metric!r} must be recorded in both assessments (x recorded "
                           f"{', '.join(x.design.metrics)}; y recorded {', '.join(y.design.metrics)}); choose "
                           f"one of {', '.join(common)}", loc=["query", "metric"])
    return metric


def _side(reader: AssessmentReader, metric: str) -> Side:
    record = reader.record
    outer, sizes = reader.outer(metric=metric, winners="either"), reader.fold_sizes()
    table = frames.family_summary(outer, metric, families=record.family_names, n_folds=record.n_folds)
    ranked = table.dropna(subset=["mean"])["family"]
    return Side(record=record, families=family_fold_scores(outer, metric, record.family_names, folds=sizes.index),
                overall=overall_fold_scores(outer, metric, folds=sizes.index), sizes=sizes,
                best=str(ranked.iloc[0]) if len(ranked) else None)


def _unpaired_reason(x: AssessmentRecord, y: AssessmentRecord) -> str:
    if x.fingerprint == y.fingerprint:
        return ""
    dx, dy = x.design, y.design
    if dx.n_samples != dy.n_samples:
        return (f"x has {dx.n_samples} rows and y has {dy.n_samples}: they were run on different data, so no "
                "outer fold of one is an outer fold of the other")
    if (dx.n_repeats, dx.n_outer_folds) != (dy.n_repeats, dy.n_outer_folds):
        return (f"x has {dx.n_repeats} repeat(s) × {dx.n_outer_folds} outer folds and y has {dy.n_repeats} × "
                f"{dy.n_outer_folds}: the outer folds cannot be matched one to one")
    return (f"both have {dx.n_samples} rows and {dx.n_repeats} repeat(s) × {dx.n_outer_folds} outer folds, "
            "but the folds hold different rows (another splitter or random_state), so their scores are "
            "not paired")


def _comparisons(x: Side, y: Side, *, rope: float) -> list[CandidatePairing]:
    pairs = [("selection procedure", f"{SELECTION} of x vs {SELECTION} of y", SELECTION, SELECTION,
              x.overall, y.overall)]
    if x.best and y.best:
        pairs.append(("best family", f"best of x ({x.best}) vs best of y ({y.best})", x.best, y.best,
                      x.families[x.best], y.families[y.best]))
    pairs += [("family", family, family, family, x.families[family], y.families[family])
              for family in x.families.columns if family in y.families.columns]
    return [_compare(kind, label, in_x, in_y, a, b, x.sizes, rope=rope)
            for kind, label, in_x, in_y, a, b in pairs]


def _compare(kind: str, label: str, in_x: str, in_y: str, a: pd.Series, b: pd.Series, sizes: pd.DataFrame, *,
             rope: float) -> CandidatePairing:
    result, error = None, None
    try:
        result = compare_paired(a.to_numpy(), b.to_numpy(), n_train=sizes["n_train"].to_numpy(),
                                n_test=sizes["n_test"].to_numpy(), rope=rope,
                                names=(f"{in_x} (x)", f"{in_y} (y)"))
    except ValueError as refused:
        error = str(refused)
    return CandidatePairing(kind=kind, label=label, x=in_x, y=in_y, result=result, error=error,
                            folds=fold_pairs(a, b))


def _summaries(x: Side, y: Side) -> list[CandidateSummaries]:
    families = list(dict.fromkeys([*x.families.columns, *y.families.columns]))
    rows = [CandidateSummaries(SELECTION, "selection procedure", x=_summary(x.overall, x.sizes),
                               y=_summary(y.overall, y.sizes))]
    for family in families:
        rows.append(CandidateSummaries(
            family, "family", x=_summary(x.families[family], x.sizes) if family in x.families.columns else None,
            y=_summary(y.families[family], y.sizes) if family in y.families.columns else None))
    return rows


def _summary(scores: pd.Series, sizes: pd.DataFrame) -> CandidateSummary:
    """Mean and sd of one candidate's outer scores with the headline interval, as the nested estimate defines them
    (the plain t over folds is no confidence interval, least of all with repeats)."""
    values = scores.to_numpy(dtype=float)
    if np.isnan(values).all():  # no score left: every fit of this candidate failed
        return CandidateSummary(n=0, n_missing=int(values.size), mean=math.nan, sd=math.nan, ci_low=math.nan,
                                ci_high=math.nan)
    folds = sizes.reindex(scores.index)
    estimate = nested_estimate(values, n_train=folds["n_train"].to_numpy(dtype=float),
                               n_test=folds["n_test"].to_numpy(dtype=float))
    return CandidateSummary(n=estimate.n_used, n_missing=estimate.n_failed, mean=estimate.mean, sd=estimate.sd,
                            ci_low=estimate.interval.low, ci_high=estimate.interval.high)
