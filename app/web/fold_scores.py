"""Outer scores laid out one row per outer fold (repeat, outer_fold): what every paired view reads.

A row is present for every outer fold of the assessment; a candidate with no score there (its fit
failed, or its family had no winner) holds NaN, which the statistics drop and count.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

FOLD_KEYS = ["repeat", "outer_fold"]


def fold_sizes(outer: pd.DataFrame) -> pd.DataFrame:
    """One row per outer fold, in (repeat, outer_fold) order, with its ``n_train`` and ``n_test``."""
    sizes = outer[[*FOLD_KEYS, "n_train", "n_test"]].drop_duplicates(FOLD_KEYS)
    return sizes.sort_values(FOLD_KEYS).set_index(FOLD_KEYS)


def family_fold_scores(outer: pd.DataFrame, metric: str, families: list[str], *,
                       folds: pd.Index | None = None) -> pd.DataFrame:
    """Each family's fold winner's outer score: one row per outer fold, one column per family.

    The rows are ``folds`` (a (repeat, outer_fold) index, as ``store.fold_sizes_for`` gives it) or, by
    default, the folds ``outer`` has rows of.
    """
    rows = outer[(outer["metric"] == metric) & outer["family_winner"]]
    return _table(rows, "family", families, fold_sizes(outer).index if folds is None else folds)


def config_fold_scores(outer: pd.DataFrame, metric: str, configs: list[str], *,
                       folds: pd.Index | None = None) -> pd.DataFrame:
    """Each configuration's own outer score (refit on every outer fold): one column per configuration id."""
    rows = outer[outer["metric"] == metric]
    return _table(rows, "config", configs, fold_sizes(outer).index if folds is None else folds)


def overall_fold_scores(outer: pd.DataFrame, metric: str, *, folds: pd.Index | None = None) -> pd.Series:
    """The overall fold winner's outer score on each outer fold: the selection procedure's scores."""
    rows = outer[(outer["metric"] == metric) & outer["overall_winner"]]
    scores = rows.set_index(FOLD_KEYS)["score"]
    return scores.reindex(fold_sizes(outer).index if folds is None else folds).astype(float)


@dataclass(frozen=True)
class FoldPair:
    """Two candidates' outer scores on one outer fold and their difference (NaN where a score is missing)."""

    repeat: int
    outer_fold: int
    a: float
    b: float
    diff: float  # a − b on scikit-learn's scores: positive favours a


def fold_pairs(a: pd.Series, b: pd.Series) -> list[FoldPair]:
    """Per outer fold, in the order of ``a``'s (repeat, outer_fold) index: the two scores and ``a - b``."""
    return [FoldPair(repeat=int(repeat), outer_fold=int(outer_fold), a=float(first), b=float(second),
                     diff=float(first - second))
            for (repeat, outer_fold), first, second in zip(a.index, a.to_numpy(float), b.to_numpy(float),
                                                           strict=True)]


def _table(rows: pd.DataFrame, column: str, wanted: list[str], folds: pd.Index) -> pd.DataFrame:
    table = rows.pivot(index=FOLD_KEYS, columns=column, values="score")
    table = table.reindex(index=folds, columns=wanted).astype(float)
    table.columns.name = None
    return table
