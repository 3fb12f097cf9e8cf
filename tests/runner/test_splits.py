"""Grouped and repeated outer splitters, and groups honoured inside each outer training set."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GroupKFold, RepeatedStratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv
from foldwise.runner.splits import lay_out


@pytest.fixture
def small_space():
    return {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                     {"logisticregression__C": [0.1, 1.0]}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 3]}),
    }


def _made_up_groups(n: int) -> np.ndarray:
    # Invented groups, not real patients: row i belongs to group i % 20, so each group spreads over the data.
    return np.arange(n) % 20


def test_grouped_outer_splitter_matches_cross_val_score(cancer, small_space, matches_grid_search):
    X, y = cancer
    groups = _made_up_groups(len(y))
    outer = GroupKFold(n_splits=4)
    assessment = nested_cv(small_space, X, y, outer=outer, inner=3, groups=groups, scoring="roc_auc",
                           progress=False)

    matches_grid_search(assessment, small_space, X, y, outer=outer, inner=3, scoring="roc_auc", groups=groups)
    assert assessment.payload.design.grouped
    for fold in assessment.payload.outer_folds:  # no group on both sides of an outer split
        test_groups = set(groups[fold.test_indices])
        train_rows = np.setdiff1d(np.arange(len(y)), fold.test_indices)
        assert not test_groups & set(groups[train_rows])


def test_repeated_outer_splitter_numbers_repeats_and_folds(cancer, small_space, matches_grid_search):
    X, y = cancer
    outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    assessment = nested_cv(small_space, X, y, outer=outer, inner=3, scoring="roc_auc", progress=False)

    matches_grid_search(assessment, small_space, X, y, outer=outer, inner=3, scoring="roc_auc")
    design = assessment.payload.design
    assert (design.n_repeats, design.n_outer_folds) == (2, 3)
    # Split i of a repeated splitter is repeat i // n_splits, fold i % n_splits (scikit-learn's
    # RepeatedStratifiedKFold yields the repeats one after another).
    for i, ((_, test), fold) in enumerate(zip(outer.split(X, y), assessment.payload.outer_folds, strict=True)):
        assert (fold.repeat, fold.outer_fold) == (i // 3, i % 3)
        assert fold.test_indices == test.tolist()
    winners = assessment.winners
    assert list(zip(winners["repeat"], winners["outer_fold"], strict=True)) == [(i // 3, i % 3) for i in range(6)]


def test_inner_splits_keep_groups_apart(cancer, small_space, matches_grid_search):
    X, y = cancer
    groups = _made_up_groups(len(y))
    outer, inner = GroupKFold(n_splits=4), GroupKFold(n_splits=3)
    assessment = nested_cv(small_space, X, y, outer=outer, inner=inner, groups=groups, scoring="roc_auc",
                           progress=False)

    # GridSearchCV(cv=GroupKFold).fit(X_train, y_train, groups=groups_train), inside cross_val_score
    # with the groups routed to fit (scikit-learn), gives the same inner and outer scores.
    matches_grid_search(assessment, small_space, X, y, outer=outer, inner=inner, scoring="roc_auc",
                        groups=groups, inner_groups=True)

    layout = lay_out(X, y, groups, outer=outer, inner=inner, classifier=True)
    for split in layout.splits:
        assert len(split.inner) == 3
        for train, test in split.inner:
            assert not set(groups[train]) & set(groups[test])
            assert np.array_equal(np.sort(np.concatenate([train, test])), np.sort(split.train))


def test_inner_group_splitter_without_groups_is_refused(cancer, small_space):
    X, y = cancer
    with pytest.raises(ValueError, match="groups"):
        nested_cv(small_space, X, y, outer=3, inner=GroupKFold(n_splits=3), progress=False)
