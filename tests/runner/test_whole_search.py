"""Search objects the runner fits whole on each outer training set: successive halving, a callable refit."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.base import clone
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (makes HalvingGridSearchCV importable)
from sklearn.model_selection import (
    GridSearchCV,
    GroupKFold,
    HalvingGridSearchCV,
    StratifiedKFold,
    cross_val_score,
    cross_validate,
)
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv


def _halving(**options):
    # An int random_state fixes the row subsamples of each halving iteration, so refits agree.
    return HalvingGridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3, 4, 5, 6]},
                               cv=3, factor=2, random_state=0, **options)


def _sorted_winners(assessment):
    return assessment.winners.sort_values(["repeat", "outer_fold"])


def test_halving_search_winners_and_outer_scores_match_the_fitted_searches(cancer):
    X, y = cancer
    search = _halving(scoring="roc_auc")
    assessment = nested_cv(search, X, y, outer=3, progress=False)

    # scikit-learn: cross_val_score of the very same search is the reference nested estimate.
    reference = cross_val_score(search, X, y, cv=3, scoring="roc_auc")
    winners = _sorted_winners(assessment)
    assert_allclose(winners["outer_score"].to_numpy(), reference, rtol=0, atol=1e-12)
    inner = assessment.inner_scores
    for fold, (train, _) in enumerate(StratifiedKFold(3).split(X, y)):
        fitted = clone(search).fit(X[train], y[train])
        assert winners["params"].iloc[fold] == fitted.best_params_
        # Each configuration keeps the scores of the last halving iteration that evaluated it.
        results = fitted.cv_results_
        for candidate, params in enumerate(results["params"]):
            later = [c for c in range(candidate + 1, len(results["params"])) if results["params"][c] == params]
            if later:
                continue
            rows = inner[(inner["outer_fold"] == fold) & inner["params"].apply(lambda p, q=params: p == q)]
            expected = [results[f"split{i}_test_score"][candidate] for i in range(3)]
            assert_allclose(rows.sort_values("inner_fold")["score"].to_numpy(), expected, rtol=0, atol=1e-12)
    design = assessment.payload.design
    assert not design.refit_all and design.n_inner_folds == 3
    assert len(assessment.outer_scores) == 3  # only the fold winner is refit and scored outside


def test_halving_search_scoring_one_metric_keeps_no_inner_scores_for_others(cancer):
    X, y = cancer
    search = _halving(scoring="roc_auc")
    assessment = nested_cv(search, X, y, outer=3, scoring=["roc_auc", "accuracy"], progress=False)

    inner = assessment.inner_scores
    assert inner.loc[inner["metric"] == "roc_auc", "score"].notna().any()
    assert inner.loc[inner["metric"] == "accuracy", "score"].isna().all()
    # The outer accuracy is the refit winner's, as cross_validate with two scorers gives (scikit-learn).
    reference = cross_validate(search, X, y, cv=3, scoring=["roc_auc", "accuracy"])["test_accuracy"]
    outer = assessment.outer_scores
    scored = outer[outer["metric"] == "accuracy"].sort_values("outer_fold")["score"].to_numpy()
    assert_allclose(scored, reference, rtol=0, atol=1e-12)


def test_scoring_other_than_the_searchs_own_selection_metric_is_refused(cancer):
    X, y = cancer
    with pytest.raises(ValueError, match=r"HalvingGridSearchCV\(scoring=None, refit=True\) selects by 'accuracy' "
                                         r"and wins over scoring='roc_auc'"):
        nested_cv(_halving(), X, y, outer=3, scoring="roc_auc", progress=False)


def test_halving_search_with_outer_groups(cancer):
    X, y = cancer
    groups = np.arange(len(y)) % 20  # invented groups: row i in group i % 20
    search = _halving(scoring="roc_auc")
    outer = GroupKFold(n_splits=3)
    assessment = nested_cv(search, X, y, outer=outer, groups=groups, progress=False)

    reference = cross_val_score(search, X, y, cv=outer, groups=groups, scoring="roc_auc")  # scikit-learn
    assert_allclose(_sorted_winners(assessment)["outer_score"].to_numpy(), reference, rtol=0, atol=1e-12)


def _first_within_a_hundredth(cv_results):
    """The first (shallowest) candidate within 0.01 of the best mean score."""
    means = np.asarray(cv_results["mean_test_score"])
    return int(np.flatnonzero(means >= means.max() - 0.01)[0])


def test_grid_search_with_a_callable_refit_is_fitted_whole(cancer):
    X, y = cancer
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3, 4, 5, 6]}, cv=3,
                          scoring="roc_auc", refit=_first_within_a_hundredth)
    assessment = nested_cv(search, X, y, outer=3, progress=False)

    # GridSearchCV refits the candidate its callable names (scikit-learn); cross_val_score of it.
    reference = cross_val_score(search, X, y, cv=3, scoring="roc_auc")
    winners = _sorted_winners(assessment)
    assert_allclose(winners["outer_score"].to_numpy(), reference, rtol=0, atol=1e-12)
    for fold, (train, _) in enumerate(StratifiedKFold(3).split(X, y)):
        assert winners["params"].iloc[fold] == clone(search).fit(X[train], y[train]).best_params_
