"""The overview's headline: the nested estimate with its interval, beside the score a non-nested search reports.

Nested cross-validation exists to make one comparison: the best inner score (what a search without an
outer loop reports) against the outer score of what that search chose (the nested estimate). Their
difference is the selection optimism, per fold ``definitions.optimism``. The headline also reads the
family table in one line, says how much a repeated outer loop would narrow a wide interval (the planner),
and says plainly which bias the estimate keeps. Every number comes from ``foldwise.definitions`` and
``foldwise.stats``; this module only lays them side by side.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from foldwise import definitions
from foldwise.stats.paired import compare_paired
from foldwise.stats.planner import repeat_narrowing
from foldwise.store import AssessmentRecord, StoredFinal
from foldwise.web.fold_scores import family_fold_scores
from foldwise.web.metric_display import metric_display
from foldwise.web.serialise import plain

# The best and worst scores a scikit-learn scorer can give, for the names it knows (common practice; from the
# scorers' definitions): the corrected t interval is symmetric and may pass them, which the page then says.
_UNIT = ("accuracy", "balanced_accuracy", "roc_auc", "average_precision", "f1", "precision", "recall", "jaccard",
         "top_k_accuracy")


def score_bounds(metric: str) -> tuple[float, float]:
    """(lowest, highest) possible score of a scikit-learn scorer name; infinite where unbounded or unknown."""
    if metric.startswith("neg_"):
        return -math.inf, 0.0
    if metric in ("r2", "explained_variance", "d2_absolute_error_score"):
        return -math.inf, 1.0
    if metric.startswith(_UNIT):
        return 0.0, 1.0
    return -math.inf, math.inf


FEW_OUTER_FOLDS = 5  # at or below this many outer folds (over all repeats) the page proposes repeats
_ROPE = 0.01  # the paired comparison's default region of practical equivalence (the comparison page's)


@dataclass(frozen=True)
class Estimate:
    """A mean over outer folds with how many folds it used: JSON-safe (None where undefined)."""

    mean: float | None
    sd: float | None
    n: int
    n_folds: int
    described: str  # "over 5 outer folds", "over 4 of 5 outer folds (1 failed)"


@dataclass(frozen=True)
class HeadlineInterval:
    low: float | None
    high: float | None
    level: float
    method: str  # definitions.HEADLINE_METHOD
    method_name: str  # in words, for the page
    past_bound: float | None  # the best (or worst) score possible, when the interval passes it
    past_side: str | None  # "best" or "worst"


@dataclass(frozen=True)
class RepeatOption:
    n_repeats: int
    n_folds: int
    narrower_by: float  # fraction of today's width saved, e.g. 0.35
    fits_ratio: float


@dataclass(frozen=True)
class FamilyReading:
    text: str  # the family table in one line
    a: str | None  # the first two families by mean, for the comparison link
    b: str | None
    verdict: str | None  # the paired comparison's verdict on a − b, when it could be made


@dataclass(frozen=True)
class Headline:
    metric: str
    estimate: Estimate  # the nested estimate: the overall fold winners' outer scores
    interval: HeadlineInterval
    inner_best: Estimate  # the fold winners' mean inner scores: what a non-nested search reports
    optimism: Estimate  # per fold inner mean − outer score (definitions.optimism), averaged
    final_inner_best: float | None  # the best inner score of the final selection on all rows, if one was made
    families: FamilyReading
    repeats: list[RepeatOption]  # empty unless the design has few outer folds
    repeats_limit: float | None  # the most any number of repeats could narrow the interval
    n_train: float | None  # mean outer training set size
    n_samples: int
    train_fraction: float | None  # n_train / n_samples, about (k − 1) / k


def headline(record: AssessmentRecord, *, metric: str, winners: pd.DataFrame, sizes: pd.DataFrame,
             summary: pd.DataFrame, family_outer: pd.DataFrame, final: StoredFinal | None) -> Headline:
    """The headline of one assessment on ``metric``.

    ``winners`` is the overall fold winners on ``metric`` (``store.winners_for``), ``sizes`` every outer
    fold's sizes (``store.fold_sizes_for``), ``summary`` the family table (``frames.family_summary``),
    ``family_outer`` the family winners' outer rows on ``metric`` and ``final`` the stored final selection.
    """
    folds = list(zip(winners["repeat"], winners["outer_fold"], strict=True))
    n_train = sizes["n_train"].reindex(folds).to_numpy(dtype=float)
    n_test = sizes["n_test"].reindex(folds).to_numpy(dtype=float)
    scores = winners["outer_score"].to_numpy(dtype=float)
    nested = definitions.nested_estimate(scores, n_folds=record.n_folds, n_train=n_train, n_test=n_test)
    inner = definitions.nested_estimate(winners["inner_mean"].to_numpy(dtype=float), n_folds=record.n_folds)
    optimism = definitions.nested_estimate(
        definitions.optimism(winners["inner_mean"].to_numpy(dtype=float), scores), n_folds=record.n_folds)
    interval = nested.interval
    lowest, highest = score_bounds(metric)
    past, side = (highest, "best") if interval.high > highest else (lowest, "worst") if interval.low < lowest \
        else (None, None)
    mean_train = float(sizes["n_train"].mean()) if len(sizes) else math.nan
    mean_test = float(sizes["n_test"].mean()) if len(sizes) else math.nan
    repeats, limit = _repeats(record, mean_train, mean_test)
    n_samples = record.design.n_samples
    return Headline(
        metric=metric, estimate=_estimate(nested), interval=HeadlineInterval(
            low=plain(interval.low), high=plain(interval.high), level=interval.level, method=interval.method,
            method_name="corrected resampled t", past_bound=past, past_side=side),
        inner_best=_estimate(inner), optimism=_estimate(optimism),
        final_inner_best=_final_inner_best(record, metric, final), families=_reading(
            record, metric, summary, family_outer, sizes),
        repeats=repeats, repeats_limit=limit, n_train=plain(mean_train), n_samples=n_samples,
        train_fraction=plain(mean_train / n_samples) if n_samples else None)


def _estimate(estimate: definitions.NestedEstimate) -> Estimate:
    return Estimate(mean=plain(estimate.mean), sd=plain(estimate.sd), n=estimate.n_used, n_folds=estimate.n_folds,
                    described=estimate.described)


def _repeats(record: AssessmentRecord, n_train: float, n_test: float) -> tuple[list[RepeatOption], float | None]:
    design = record.design
    if record.n_folds > FEW_OUTER_FOLDS or record.n_folds < 2 or not (n_train > 0 and n_test > 0):
        return [], None
    plan = repeat_narrowing(n_outer=design.n_outer_folds, n_repeats=design.n_repeats, n_train=n_train,
                            n_test=n_test, level=definitions.HEADLINE_LEVEL)
    options = [RepeatOption(n_repeats=gain.n_repeats, n_folds=gain.n_folds, narrower_by=1 - gain.width_ratio,
                            fits_ratio=gain.fits_ratio) for gain in plan.gains]
    return options, 1 - plan.limit_ratio


def _final_inner_best(record: AssessmentRecord, metric: str, final: StoredFinal | None) -> float | None:
    """The chosen configuration's inner mean on all rows (``definitions.inner_mean``): GridSearchCV's
    ``best_score_`` for the selection metric, the number a search without an outer loop reports."""
    if final is None or final.selection.config is None:
        return None
    columns = final.selection.inner_scores
    rows = np.flatnonzero((columns.config == final.selection.config)
                          & (columns.metric == record.design.metrics.index(metric)))
    scores = columns.score[rows[np.argsort(columns.inner_fold[rows], kind="stable")]]  # NaN where a fit failed
    return plain(float(definitions.inner_mean(scores))) if scores.size else None


def _reading(record: AssessmentRecord, metric: str, summary: pd.DataFrame, family_outer: pd.DataFrame,
             sizes: pd.DataFrame) -> FamilyReading:
    ranked = summary.dropna(subset=["mean"])
    if ranked.empty:
        return FamilyReading("No family has an outer score on this metric.", None, None, None)
    first = ranked.iloc[0]
    shown = metric_display(metric)  # the means as the page shows them (a negated loss as itself)
    lead = (f"{first['family']} has the best mean outer score ({shown.value(first['mean']):.3f}, over {first['n']} "
            f"outer folds)")
    if len(ranked) < 2:
        return FamilyReading(f"{lead}; no other family has an outer score to compare it with.", None, None, None)
    second = ranked.iloc[1]
    a, b = str(first["family"]), str(second["family"])
    gap = float(first["mean"] - second["mean"])
    scores = family_fold_scores(family_outer, metric, [a, b], folds=sizes.index)
    try:
        verdict = compare_paired(scores[a].to_numpy(), scores[b].to_numpy(), n_train=sizes["n_train"].to_numpy(),
                                 n_test=sizes["n_test"].to_numpy(), rope=_ROPE, names=(a, b)).verdict
    except ValueError:  # fewer than two outer folds where both have a score
        verdict = None
    return FamilyReading(f"{lead}, {gap:.3f} ahead of {b} ({shown.value(second['mean']):.3f})", a, b, verdict)
