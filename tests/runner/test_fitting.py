"""What each fit costs, what a failing fit leaves behind, and the outer-test predictions kept."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin, clone
from sklearn.datasets import load_iris
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv


class CountingRegressor(RegressorMixin, BaseEstimator):
    """Predicts the training mean plus ``shift``; every fit is logged on the class.

    The runner clones before each fit; a clone is a new instance of the same class, so a class-level
    log sees every fit made in this process (n_jobs=1).
    """

    fits: list[tuple[int, float]] = []

    def __init__(self, shift=0.0):
        self.shift = shift

    def fit(self, X, y):
        type(self).fits.append((len(X), self.shift))
        self.mean_ = float(np.mean(y)) + self.shift
        return self

    def predict(self, X):
        return np.full(len(X), self.mean_)


class FragileClassifier(ClassifierMixin, BaseEstimator):
    """A decision tree whose fit raises when ``bad`` is set."""

    def __init__(self, bad=False, max_depth=1):
        self.bad, self.max_depth = bad, max_depth

    def fit(self, X, y):
        if self.bad:
            raise ValueError("bad=True cannot be fitted")
        self.tree_ = DecisionTreeClassifier(max_depth=self.max_depth, random_state=0).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


@pytest.fixture
def counted():
    CountingRegressor.fits.clear()
    yield CountingRegressor.fits
    CountingRegressor.fits.clear()


@pytest.fixture
def noise():
    # Invented regression data with a fixed seed.
    rng = np.random.default_rng(0)
    return rng.normal(size=(60, 3)), rng.normal(size=60)


COUNTING_SPACE = {"a": (CountingRegressor(), {"shift": [0.0, 0.3, 0.6]}),
                  "b": (CountingRegressor(), {"shift": [-0.2, 0.1]})}


@pytest.mark.parametrize("refit_all", [True, False])
def test_fits_inner_models_and_the_outer_refits(counted, noise, refit_all):
    X, y = noise
    n, k, m, n_families = 4, 3, 5, 2
    assessment = nested_cv(COUNTING_SPACE, X, y, outer=KFold(n), inner=KFold(k), refit_all=refit_all,
                           progress=False, n_jobs=1)

    # Common practice: nested cross-validation costs n x k x m inner fits, plus the refits on each
    # outer training set (every configuration, or only the fold winners as GridSearchCV refits).
    outer_train, inner_train = 45, 30  # 60 rows: KFold(4) trains on 45, KFold(3) of those on 30
    assert [rows for rows, _ in counted].count(inner_train) == n * k * m
    refits = [shift for rows, shift in counted if rows == outer_train]
    assert len(counted) == n * k * m + len(refits)
    assert len(refits) == (n * m if refit_all else n * n_families)
    if not refit_all:
        assert sorted(refits) == sorted(params["shift"] for params in assessment.family_winners["params"])
        assert len(assessment.outer_scores) == n * n_families
        assert not assessment.payload.design.refit_all


SPACE_WITH_FAILURES = {
    # bad=True comes first in grid order, so a NaN mean taken for the best would show.
    "fragile": (FragileClassifier(), {"bad": [True, False], "max_depth": [1, 3]}),
    "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                 {"logisticregression__C": [0.1]}),
}


def test_failing_fits_are_recorded_and_never_win(cancer):
    X, y = cancer
    n, k = 3, 3
    with pytest.warns(RuntimeWarning, match=r"of \d+ fits failed and were recorded with NaN scores") as caught:
        assessment = nested_cv(SPACE_WITH_FAILURES, X, y, outer=n, inner=k, scoring="roc_auc", progress=False)

    assert len([w for w in caught if issubclass(w.category, RuntimeWarning)]) == 1  # once, at the end
    payload = assessment.payload
    bad = {position for position, config in enumerate(payload.configurations) if config.params.get("bad")}
    assert len(bad) == 2
    # Each bad configuration fails in every inner fold and in its refit on every outer fold.
    assert len(payload.failures) == len(bad) * n * (k + 1)
    assert f"{len(payload.failures)} of {n * k * 5 + n * 5} fits failed" in str(caught[0].message)
    for failure in payload.failures:
        assert failure.config in bad
        assert "ValueError: bad=True cannot be fitted" in failure.message
        assert (failure.inner_fold is None) == (failure.level == "outer")

    inner, outer = assessment.inner_scores, assessment.outer_scores
    failed_inner = inner["params"].apply(lambda p: bool(p.get("bad")))
    assert inner.loc[failed_inner, "score"].isna().all() and inner.loc[~failed_inner, "score"].notna().all()
    failed_outer = outer["params"].apply(lambda p: bool(p.get("bad")))
    assert outer.loc[failed_outer, "score"].isna().all() and outer.loc[~failed_outer, "score"].notna().all()
    assert not any(params.get("bad") for params in assessment.family_winners["params"])
    assert assessment.family_winners["outer_score"].notna().all()


def test_a_family_failing_everywhere_leaves_the_others_to_win(cancer):
    X, y = cancer
    space = {"broken": (FragileClassifier(bad=True), {"max_depth": [1, 2]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2]})}
    with pytest.warns(RuntimeWarning, match="fits failed"):
        assessment = nested_cv(space, X, y, outer=3, inner=3, progress=False)
    assert set(assessment.family_winners["family"]) == {"tree"}
    assert set(assessment.winners["family"]) == {"tree"}
    summary = assessment.summary().set_index("family")
    # The failing family is listed, counted as failed in every fold, never averaged over nothing.
    assert list(summary.index) == ["tree", "broken"]
    assert (summary.loc["tree", "n"], summary.loc["tree", "n_failed"]) == (3, 0)
    assert (summary.loc["broken", "n"], summary.loc["broken", "n_failed"]) == (0, 3)
    assert np.isnan(summary.loc["broken", "mean"])


def test_a_run_where_everything_fails_returns_every_fold_failed(cancer):
    X, y = cancer
    space = {"broken": (FragileClassifier(bad=True), {"max_depth": [1, 2]})}
    with pytest.warns(RuntimeWarning, match=r"24 of 24 fits failed and were recorded with NaN scores: 24 × "
                                            r"ValueError: bad=True cannot be fitted\. Every configuration failed "
                                            r"in 3 outer folds \(repeat 0, outer fold 0; "):
        assessment = nested_cv(space, X, y, outer=3, inner=3, progress=False)
    assert assessment.payload.overall_winners == [] and assessment.payload.family_winners == []
    estimate = assessment.nested_estimate
    assert (estimate.n_used, estimate.n_folds) == (0, 3) and np.isnan(estimate.mean)
    assert len(assessment.failures) == 2 * 3 * (3 + 1)


def test_predictions_are_the_refit_models_probabilities(cancer):
    X, y = cancer
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [0.1, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 4]})}
    assessment = nested_cv(space, X, y, outer=3, inner=3, scoring="roc_auc", progress=False)
    payload = assessment.payload

    splits = list(StratifiedKFold(3).split(X, y))  # what outer=3 means for a classifier (scikit-learn check_cv)
    assert len(payload.predictions) == len(splits) * len(payload.configurations)
    for fold, (_, test) in zip(payload.outer_folds, splits, strict=True):
        assert fold.y_true == y[test].tolist()
    for prediction in payload.predictions:
        train, test = splits[prediction.outer_fold]
        config = payload.configurations[prediction.config]
        estimator = space[config.family][0]
        # Reference: the same configuration fitted here, by hand, on the outer training rows.
        model = clone(estimator).set_params(**config.params).fit(X[train], y[train])
        values = prediction.array()
        assert prediction.kind == "proba" and values.dtype == np.float64
        assert values.shape == (len(test), 2)
        assert_allclose(values, model.predict_proba(X[test]), rtol=0, atol=1e-12)


def test_probability_columns_follow_the_class_order_when_a_fold_lacks_a_class():
    # Fisher's iris (1936), bundled with scikit-learn, is sorted by class, so unshuffled KFold(3)
    # trains outer fold 0 on classes 1 and 2 only.
    X, y = load_iris(return_X_y=True)
    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2]})}
    assessment = nested_cv(space, X, y, outer=KFold(3), inner=3, progress=False)

    (first, *_) = [p for p in assessment.payload.predictions if p.outer_fold == 0]
    train, test = next(iter(KFold(3).split(X, y)))
    model = DecisionTreeClassifier(random_state=0, max_depth=2).fit(X[train], y[train])
    assert model.classes_.tolist() == [1, 2]
    values = first.array()
    assert values.shape == (50, 3)
    assert_allclose(values[:, 0], 0.0)
    assert_allclose(values[:, 1:], model.predict_proba(X[test]), rtol=0, atol=1e-12)


def test_regressor_predictions_and_turning_them_off(diabetes):
    X, y = diabetes
    space = {"ridge": (Ridge(), {"alpha": [0.1, 1.0]})}
    outer = KFold(3, shuffle=True, random_state=0)
    kept = nested_cv(space, X, y, outer=outer, inner=3, progress=False)
    for prediction in kept.payload.predictions:
        train, test = list(outer.split(X))[prediction.outer_fold]
        params = kept.payload.configurations[prediction.config].params
        model = Ridge(**params).fit(X[train], y[train])  # reference fit, by hand
        assert prediction.kind == "predict"
        assert_allclose(prediction.array()[:, 0], model.predict(X[test]), rtol=0, atol=1e-9)

    dropped = nested_cv(space, X, y, outer=outer, inner=3, progress=False, keep_predictions=False)
    assert dropped.payload.predictions == []
    assert [f.y_true for f in dropped.payload.outer_folds] == [f.y_true for f in kept.payload.outer_folds]
    assert_allclose(dropped.outer_scores["score"], kept.outer_scores["score"], rtol=0, atol=0)
