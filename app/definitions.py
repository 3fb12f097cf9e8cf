"""The one definition of each quantity an assessment reports.

A configuration's inner mean and sd, the fold winners, the nested estimate with its fold count, a
family's summary and the optimism of a fold winner are defined here and nowhere else: the runner's
selection, the store's cached per-fold summaries, the frames, the pages, the API and the client call
these functions, so that "the same number" is the same float everywhere.

Failed fits are NaN. The rules for them, in one place:

- A configuration's inner mean (and sd) is NaN when any of its inner folds failed, as scikit-learn's
  ``mean_test_score`` is with ``error_score=np.nan``: such a configuration never wins a fold.
- A fold in which every configuration failed has no winner; the fold counts as failed.
- The nested estimate is the mean of the overall fold winners' outer scores over the folds where
  that score exists, and always comes with how many folds it used out of how many the design has
  (``NestedEstimate.described``: "over 8 of 11 outer folds (3 failed)").
- A family's summary counts its folds the same way.

The headline interval beside the nested estimate is, by one stated rule, the corrected resampled t
interval (``foldwise.stats.intervals.corrected_t_interval``: Nadeau and Bengio, 2003; Bouckaert and
Frank, 2004): centred on the nested estimate itself, free (no extra fit), valid with repeated outer loops,
and it covered at its nominal level in every setting of the coverage simulation (``make coverage``).

This module imports only ``foldwise.stats`` (pure functions), so every layer may use it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from foldwise.stats.intervals import Interval, corrected_t_interval

HEADLINE_METHOD = "corrected_t"
HEADLINE_LEVEL = 0.95

SUMMARY_KEYS = ("repeat", "outer_fold", "config", "metric")


def inner_mean(scores) -> np.ndarray:
    """Mean over the last axis (the inner folds); NaN when any inner fold failed.

    ``np.average`` as ``GridSearchCV`` computes ``mean_test_score`` (``_format_results``), so equal
    inputs give equal floats, and a NaN score (a failed fit kept with ``error_score=np.nan``) makes
    the mean NaN.
    """
    return np.average(np.asarray(scores, dtype=float), axis=-1)


def inner_sd(scores) -> np.ndarray:
    """Population sd (ddof=0) over the last axis, as ``std_test_score``; NaN when any inner fold failed."""
    values = np.asarray(scores, dtype=float)
    return np.sqrt(np.average((values - inner_mean(values)[..., None]) ** 2, axis=-1))


@dataclass(frozen=True)
class FoldWinners:
    """The choices of one outer fold: each family's winner (None when all its configurations failed) and
    the overall winner (None when every configuration failed: the fold then counts as failed)."""

    family: list[int | None]
    overall: int | None


def select_in_fold(inner: np.ndarray, families: Sequence[Sequence[int]]) -> FoldWinners:
    """Pick each family's winner and the overall winner of one outer fold.

    Parameters
    ----------
    inner : array of shape (n_configs, n_inner_folds)
        The selection metric's inner scores (greater is better), NaN where a fit failed.
    families : sequence of sequences of config positions, in family order and grid order within each.

    Notes
    -----
    Within a family the configuration with the greatest inner mean wins, ties going to the first in
    grid order, as ``GridSearchCV``'s ``best_index_`` (the first position of the greatest
    ``mean_test_score``). A configuration with any failed inner fit has a NaN mean and never wins.
    The overall winner is the best family winner, ties going to the first family.
    """
    means = inner_mean(inner)
    family_winners: list[int | None] = []
    for members in families:
        scores = means[list(members)]
        family_winners.append(None if np.isnan(scores).all() else int(members[int(np.nanargmax(scores))]))
    overall, best = None, -np.inf
    for winner in family_winners:
        if winner is not None and means[winner] > best:
            overall, best = winner, means[winner]
    return FoldWinners(family_winners, overall)


def inner_summaries(repeat, outer_fold, config, metric, score) -> dict[str, np.ndarray]:
    """Each (repeat, outer_fold, config, metric) group's inner mean and sd, by the rules above.

    Vectorised for the store, which keeps these as a cache beside the scores (a test checks the cache
    against :func:`inner_mean` and :func:`inner_sd`). Returns the key columns ``SUMMARY_KEYS`` of the
    groups present, in sorted order, plus ``inner_mean``, ``inner_std`` (float64, NaN where any inner
    fit of the group failed) and ``n_failed`` (failed inner fits of the group).
    """
    given = (repeat, outer_fold, config, metric, score)
    lengths = {name: len(column) for name, column in zip((*SUMMARY_KEYS, "score"), given, strict=True)}
    if len(set(lengths.values())) > 1:
        raise ValueError(f"inner score columns must have one length; received lengths {lengths}")
    keys = [np.asarray(column, dtype=np.int64) for column in (repeat, outer_fold, config, metric)]
    scores = np.asarray(score, dtype=float)
    if scores.size == 0:
        empty = {name: np.empty(0, dtype=np.int64) for name in (*SUMMARY_KEYS, "n_failed")}
        return empty | {"inner_mean": np.empty(0), "inner_std": np.empty(0)}
    order = np.lexsort(keys[::-1])
    keys, scores = [column[order] for column in keys], scores[order]
    starts = np.flatnonzero(np.r_[True, np.any([column[1:] != column[:-1] for column in keys], axis=0)])
    sizes = np.diff(np.r_[starts, scores.size])
    failed = np.add.reduceat(np.isnan(scores).astype(np.int64), starts)
    mean, std = np.empty(starts.size), np.empty(starts.size)
    for size in np.unique(sizes):  # groups of one size as rows of a matrix: the very floats of inner_mean
        chosen = sizes == size
        rows = scores[starts[chosen][:, None] + np.arange(size)]
        mean[chosen], std[chosen] = inner_mean(rows), inner_sd(rows)
    columns = {name: column[starts] for name, column in zip(SUMMARY_KEYS, keys, strict=True)}
    return columns | {"inner_mean": mean, "inner_std": std, "n_failed": failed}


def optimism(inner_means, outer_scores) -> np.ndarray:
    """Inner mean of the chosen configuration minus its outer score (greater-is-better orientation):
    how much the inner loop flattered the fold winner. NaN where either is NaN."""
    return np.asarray(inner_means, dtype=float) - np.asarray(outer_scores, dtype=float)


@dataclass(frozen=True)
class NestedEstimate:
    """The nested estimate: the mean outer score of the overall fold winners, with its fold count.

    ``n_folds`` is every outer fold of every repeat of the design; ``n_used`` those whose winner has an
    outer score. ``mean`` and ``sd`` (ddof=1) are over the used folds; NaN when none (or, for ``sd``,
    fewer than two) were used.
    """

    mean: float
    sd: float
    n_used: int
    n_folds: int
    interval: Interval | None = None  # the headline interval, when the fold sizes were known

    @property
    def n_failed(self) -> int:
        return self.n_folds - self.n_used

    @property
    def described(self) -> str:
        """'over 11 outer folds', or 'over 8 of 11 outer folds (3 failed)' when any failed."""
        unit = "outer fold" if self.n_folds == 1 else "outer folds"
        if self.n_failed == 0:
            return f"over {self.n_folds} {unit}"
        return f"over {self.n_used} of {self.n_folds} {unit} ({self.n_failed} failed)"


def nested_estimate(winner_scores, *, n_folds: int | None = None, n_train=None, n_test=None,
                    level: float = HEADLINE_LEVEL) -> NestedEstimate:
    """The nested estimate from the overall fold winners' outer scores.

    Parameters
    ----------
    winner_scores : array-like of float
        One outer score per fold that has an overall winner, over every repeat; NaN where the
        winner's outer refit or scoring failed.
    n_folds : int, optional
        Outer folds of the design over all repeats (``n_repeats * n_outer_folds``); folds with no
        winner at all (every configuration failed) count as failed. Defaults to ``len(winner_scores)``.
    n_train, n_test : array-like, optional
        Each of those folds' outer training and test set sizes (or one number each); with them the
        estimate carries its headline interval at ``level`` (see the module docstring).
    """
    values = np.asarray(winner_scores, dtype=float).ravel()
    total = values.size if n_folds is None else int(n_folds)
    if total < values.size:
        raise ValueError(f"n_folds is {total} but {values.size} fold winners' scores were given; a fold has "
                         "at most one overall winner")
    used = values[~np.isnan(values)]
    mean = float(np.mean(used)) if used.size else math.nan
    sd = float(np.std(used, ddof=1)) if used.size > 1 else math.nan
    interval = None if n_train is None or n_test is None else headline_interval(
        values, n_train=n_train, n_test=n_test, level=level)
    return NestedEstimate(mean=mean, sd=sd, n_used=int(used.size), n_folds=total, interval=interval)


def headline_interval(winner_scores, *, n_train, n_test, level: float = HEADLINE_LEVEL) -> Interval:
    """The interval shown beside a nested estimate: the corrected resampled t interval (module docstring)."""
    return corrected_t_interval(winner_scores, n_train=n_train, n_test=n_test, level=level)


FAMILY_SUMMARY_COLUMNS = ["family", "mean", "sd", "min", "max", "n", "n_failed"]


def family_summary(winner_scores: pd.DataFrame, *, families: Sequence[str], n_folds: int) -> pd.DataFrame:
    """Per family: mean, sd (ddof=1), min and max of its fold winners' outer scores, with fold counts.

    ``winner_scores`` has one row per family winner and fold (columns ``family`` and ``score``, NaN for
    a failed outer fit); ``families`` names every family in the assessment's order, so a family that
    never won a fold (every configuration failed everywhere) is listed with NaN and every fold failed.
    ``n`` counts the folds used; ``n_failed`` = ``n_folds`` − ``n``. Sorted by mean, best first, NaN last.
    """
    rows = []
    for family in families:
        scores = winner_scores.loc[winner_scores["family"] == family, "score"].to_numpy(dtype=float)
        estimate = nested_estimate(scores, n_folds=n_folds)
        used = scores[~np.isnan(scores)]
        rows.append((family, estimate.mean, estimate.sd, float(used.min()) if used.size else math.nan,
                     float(used.max()) if used.size else math.nan, estimate.n_used, estimate.n_failed))
    table = pd.DataFrame(rows, columns=FAMILY_SUMMARY_COLUMNS).astype({"n": "int64", "n_failed": "int64"})
    return table.sort_values("mean", ascending=False, kind="stable", na_position="last").reset_index(drop=True)
