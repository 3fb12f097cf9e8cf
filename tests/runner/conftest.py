"""Data and the scikit-learn reference shared by the runner's tests."""

from __future__ import annotations

import pytest
from numpy.testing import assert_allclose
from sklearn.base import clone, is_classifier
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, check_cv, cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from threadpoolctl import threadpool_limits


@pytest.fixture(scope="session", autouse=True)
def _one_blas_thread():
    # Small fits on a shared 2-core machine run many times slower when BLAS spreads each over threads.
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session")
def cancer():
    """Wisconsin Diagnostic Breast Cancer, as bundled with scikit-learn (load_breast_cancer)."""
    return load_breast_cancer(return_X_y=True)


@pytest.fixture(scope="session")
def diabetes():
    """The diabetes data of Efron et al. (2004, Annals of Statistics 32), bundled with scikit-learn."""
    return load_diabetes(return_X_y=True)


@pytest.fixture
def classifier_space():
    """Two small classifier families; LogisticRegression converges on standardised features."""
    return {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                     {"logisticregression__C": [0.01, 0.1, 1.0]}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3]}),
    }


@pytest.fixture(scope="session")
def matches_grid_search():
    return assert_matches_grid_search


def assert_matches_grid_search(assessment, space, X, y, *, outer, inner, scoring, groups=None,
                               inner_groups=False):
    """Each family must behave as ``GridSearchCV`` inside ``cross_val_score`` (scikit-learn, the reference).

    Checked per family: the family winners' outer scores equal ``cross_val_score(GridSearchCV(...))``;
    in every outer fold, each candidate's inner scores equal that fold's fitted search's
    ``cv_results_["split{i}_test_score"]`` and the family winner is its ``best_params_``.
    ``inner_groups`` passes the outer training rows' groups to the search's fit, as the runner does.
    """
    first = next(iter(space.values()))[0]
    # cross_val_score resolves an int cv with check_cv, stratified for classifiers (scikit-learn).
    splits = list(check_cv(outer, y, classifier=is_classifier(first)).split(X, y, groups))
    folds = assessment.payload.outer_folds
    assert len(folds) == len(splits)
    for fold, (_, test) in zip(folds, splits, strict=True):
        assert fold.test_indices == test.tolist()

    inner_scores = assessment.inner_scores
    inner_scores = inner_scores[inner_scores["metric"] == scoring]
    winners = assessment.family_winners
    for family, (estimator, grid) in space.items():
        search = GridSearchCV(estimator, grid, cv=inner, scoring=scoring)
        fit_params = {"groups": groups} if inner_groups else None
        # scikit-learn's cross_val_score of a GridSearchCV: the reference nested estimate.
        reference = cross_val_score(search, X, y, cv=outer, groups=groups, scoring=scoring, params=fit_params)
        mine = winners[winners["family"] == family].sort_values(["repeat", "outer_fold"])
        assert len(mine) == len(splits)
        assert_allclose(mine["outer_score"].to_numpy(), reference, rtol=0, atol=1e-12)

        for position, (fold, (train, _)) in enumerate(zip(folds, splits, strict=True)):
            fitted = clone(search).fit(X[train], y[train], **({"groups": groups[train]} if inner_groups else {}))
            rows = inner_scores[(inner_scores["repeat"] == fold.repeat)
                                & (inner_scores["outer_fold"] == fold.outer_fold)
                                & (inner_scores["family"] == family)]
            results = fitted.cv_results_
            assert rows["config"].nunique() == len(results["params"])
            for candidate, params in enumerate(results["params"]):
                scores = rows[rows["params"].apply(lambda p, params=params: p == params)]
                scores = scores.sort_values("inner_fold")["score"].to_numpy()
                expected = [results[f"split{i}_test_score"][candidate] for i in range(fitted.n_splits_)]
                assert_allclose(scores, expected, rtol=0, atol=1e-12)
            assert mine["params"].iloc[position] == fitted.best_params_

