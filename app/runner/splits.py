"""Outer and inner splits, resolved as scikit-learn resolves them."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from sklearn.model_selection import check_cv
from sklearn.utils import _safe_indexing


@dataclass(frozen=True)
class OuterSplit:
    repeat: int
    outer_fold: int
    train: np.ndarray  # row positions in the whole data set
    test: np.ndarray
    inner: list[tuple[np.ndarray, np.ndarray]]  # (train, test) as positions in the whole data set


@dataclass(frozen=True)
class Layout:
    splits: list[OuterSplit]
    n_repeats: int
    n_outer_folds: int
    n_inner_folds: int
    outer_splitter: str
    inner_splitter: str


_SAME = object()


def lay_out(X, y, groups, *, outer, inner, classifier: bool, inner_groups=_SAME) -> Layout:
    """Split the data into outer folds, and each outer training set into inner folds.

    ``outer`` and ``inner`` are ints or splitters, resolved with ``check_cv`` (stratified for
    classifiers), as ``GridSearchCV`` and ``cross_val_score`` resolve them. Inner splits see only the
    outer training rows, and the group labels of those rows (``inner_groups`` when given apart, as
    metadata routing may send groups to one splitter only); an inner splitter that ignores groups
    splits them ungrouped.
    """
    inner_groups = groups if inner_groups is _SAME else inner_groups
    outer_cv = check_cv(outer, y, classifier=classifier)
    raw = list(outer_cv.split(X, y, groups))
    n_repeats = int(getattr(outer_cv, "n_repeats", 1) or 1)
    if len(raw) % n_repeats:
        raise ValueError(f"{outer_cv!r} gave {len(raw)} splits, not a multiple of its {n_repeats} repeats")
    per_repeat = len(raw) // n_repeats
    splits, inner_counts, inner_repr = [], set(), ""
    for i, (train, test) in enumerate(raw):
        y_train = _safe_indexing(y, train)
        groups_train = None if inner_groups is None else _safe_indexing(inner_groups, train)
        inner_cv = check_cv(inner, y_train, classifier=classifier)
        inner_repr = repr(inner_cv)
        with warnings.catch_warnings():
            # The groups are there for an inner splitter that uses them; one that does not (an int
            # resolves to StratifiedKFold or KFold, as in GridSearchCV) was chosen ungrouped on purpose.
            warnings.filterwarnings("ignore", "The groups parameter is ignored", UserWarning)
            inner_splits = [(train[a], train[b]) for a, b in inner_cv.split(_safe_indexing(X, train), y_train,
                                                                             groups_train)]
        inner_counts.add(len(inner_splits))
        splits.append(OuterSplit(i // per_repeat, i % per_repeat, train, test, inner_splits))
    if len(inner_counts) != 1:
        raise ValueError(f"the inner splitter gave different numbers of folds per outer fold: {inner_counts}")
    return Layout(splits, n_repeats, per_repeat, inner_counts.pop(), repr(outer_cv), inner_repr)
