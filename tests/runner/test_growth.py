"""Growing one model through a family's tree or stage counts gives what separate fresh fits give.

The reference is scikit-learn itself: each configuration cloned and fitted from nothing
(``clone(...).set_params(...).fit``), and ``GridSearchCV`` inside ``cross_val_score``.
"""

from __future__ import annotations

import base64

import numpy as np
import pytest
import skops.io
from numpy.testing import assert_array_equal
from sklearn.base import clone
from sklearn.datasets import load_wine
from sklearn.ensemble import (
    BaggingClassifier,
    BaggingRegressor,
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    GradientBoostingClassifier,
    GradientBoostingRegressor,
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from foldwise import nested_cv
from foldwise.runner.growth import growth_chains
from foldwise.runner.space import space_from

GROWING_CLASSIFIERS = [
    (RandomForestClassifier(random_state=0, max_depth=3), {"n_estimators": [4, 9, 15]}),
    (ExtraTreesClassifier(random_state=1, max_features=0.5), {"n_estimators": [3, 8]}),
    (BaggingClassifier(random_state=2, max_samples=0.7), {"n_estimators": [3, 7]}),
    (GradientBoostingClassifier(random_state=3, subsample=0.7, max_features=0.5), {"n_estimators": [5, 12]}),
    (HistGradientBoostingClassifier(random_state=4, max_features=0.5), {"max_iter": [5, 12]}),
]
GROWING_REGRESSORS = [
    (RandomForestRegressor(random_state=0, max_depth=4), {"n_estimators": [4, 9]}),
    (ExtraTreesRegressor(random_state=1), {"n_estimators": [3, 8]}),
    (BaggingRegressor(random_state=2), {"n_estimators": [3, 7]}),
    (GradientBoostingRegressor(random_state=3, subsample=0.8), {"n_estimators": [5, 12]}),
    (HistGradientBoostingRegressor(random_state=4, early_stopping=False), {"max_iter": [5, 12]}),
]


def _fresh_outer_predictions(estimator, grid_point, X, y, train, test, proba: bool) -> np.ndarray:
    """What a configuration fitted from nothing predicts (scikit-learn: clone, set_params, fit)."""
    model = clone(estimator).set_params(**grid_point).fit(X[train], y[train])
    return model.predict_proba(X[test]) if proba else model.predict(X[test])


def _outer_predictions(assessment) -> dict[tuple[int, str], np.ndarray]:
    ids = [config.id for config in assessment.payload.configurations]
    return {(p.outer_fold, ids[p.config]): p.array().squeeze() for p in assessment.payload.predictions}


@pytest.mark.parametrize("estimator, grid", GROWING_CLASSIFIERS, ids=lambda v: type(v).__name__)
def test_grown_classifiers_predict_as_fresh_fits(estimator, grid, matches_grid_search):
    X, y = load_wine(return_X_y=True)  # three classes (scikit-learn's bundled wine data)
    space = {"grown": (estimator, grid)}
    assert len(growth_chains(space_from(space), n_samples=len(y))) == 1
    assessment = nested_cv(space, X, y, outer=3, inner=2, scoring=["neg_log_loss", "accuracy"], progress=False)

    matches_grid_search(assessment, space, X, y, outer=3, inner=2, scoring="neg_log_loss")
    predictions = _outer_predictions(assessment)
    for fold, (train, test) in enumerate(StratifiedKFold(3).split(X, y)):
        for config, point in zip(assessment.payload.configurations, space_from(space).candidates, strict=True):
            reference = _fresh_outer_predictions(estimator, point.params, X, y, train, test, proba=True)
            assert_array_equal(predictions[(fold, config.id)], reference)  # bit for bit


@pytest.mark.parametrize("estimator, grid", GROWING_REGRESSORS, ids=lambda v: type(v).__name__)
def test_grown_regressors_predict_as_fresh_fits(estimator, grid, diabetes, matches_grid_search):
    X, y = diabetes
    space = {"grown": (estimator, grid)}
    outer = KFold(3, shuffle=True, random_state=0)
    assessment = nested_cv(space, X, y, outer=outer, inner=2, scoring="r2", progress=False, n_jobs=2)

    matches_grid_search(assessment, space, X, y, outer=outer, inner=2, scoring="r2")
    predictions = _outer_predictions(assessment)
    for fold, (train, test) in enumerate(outer.split(X, y)):
        for config, point in zip(assessment.payload.configurations, space_from(space).candidates, strict=True):
            reference = _fresh_outer_predictions(estimator, point.params, X, y, train, test, proba=False)
            assert_array_equal(predictions[(fold, config.id)], reference)


def test_growing_and_fresh_runs_store_the_same_scores(cancer):
    X, y = cancer
    space = {"forest": (RandomForestClassifier(random_state=0), {"n_estimators": [5, 10], "max_depth": [2, None]}),
             "boosting": (make_pipeline(StandardScaler(), GradientBoostingClassifier(random_state=0)),
                          {"gradientboostingclassifier__n_estimators": [5, 10]}),
             "logistic": (make_pipeline(StandardScaler(), LogisticRegression()), {"logisticregression__C": [1.0]})}
    runs = {grow: nested_cv(space, X, y, outer=3, inner=3, scoring=["roc_auc", "accuracy"], progress=False,
                            n_jobs=2, grow=grow).payload for grow in (True, False)}
    for table in ("inner_scores", "outer_scores"):
        grown, fresh = (getattr(runs[grow], table) for grow in (True, False))
        assert_array_equal(grown.score, fresh.score)
        assert_array_equal(grown.config, fresh.config)
        assert_array_equal(grown.outer_fold, fresh.outer_fold)
    assert runs[True].family_winners == runs[False].family_winners
    assert [p.data for p in runs[True].predictions] == [p.data for p in runs[False].predictions]
    # Each grown configuration's fit time includes what it inherited; the total counts every tree once.
    inner = runs[True].inner_scores
    assert runs[True].total_fit_time < sum(inner.fit_time[::2]) + sum(runs[True].outer_scores.fit_time[::2])


def test_kept_fold_winners_are_the_fresh_fits_with_warm_start_off(cancer):
    X, y = cancer
    estimator = RandomForestClassifier(random_state=0, max_depth=3)
    space = {"forest": (estimator, {"n_estimators": [5, 10, 20]})}
    assessment = nested_cv(space, X, y, outer=3, inner=2, scoring="roc_auc", progress=False, keep_models=True)
    ids = [config.id for config in assessment.payload.configurations]
    candidates = {c.id: c.params for c in space_from(space).candidates}
    for kept, (train, test) in zip(assessment.payload.models, StratifiedKFold(3).split(X, y), strict=True):
        data = base64.b64decode(kept.skops)
        raw = skops.io.loads(data, trusted=skops.io.get_untrusted_types(data=data))  # our own file: all trusted
        assert raw.warm_start is False
        reference = _fresh_outer_predictions(estimator, candidates[ids[kept.config]], X, y, train, test, proba=True)
        assert_array_equal(raw.predict_proba(X[test]), reference)


def test_a_failing_step_is_recorded_and_the_next_starts_fresh(cancer):
    X, y = cancer
    estimator = RandomForestClassifier(random_state=0, max_depth=2)
    space = {"forest": (estimator, {"n_estimators": [-1, 4, 8]})}  # -1 fails scikit-learn's validation
    with pytest.warns(RuntimeWarning, match="fits failed"):
        assessment = nested_cv(space, X, y, outer=2, inner=2, scoring="roc_auc", progress=False)
    failures = assessment.payload.failures
    assert {f.config for f in failures} == {0} and len(failures) == 2 * 2 + 2
    assert "n_estimators" in failures[0].message
    predictions = _outer_predictions(assessment)
    ids = [config.id for config in assessment.payload.configurations]
    for fold, (train, test) in enumerate(StratifiedKFold(2).split(X, y)):
        for config, count in ((1, 4), (2, 8)):
            reference = _fresh_outer_predictions(estimator, {"n_estimators": count}, X, y, train, test, proba=True)
            assert_array_equal(predictions[(fold, ids[config])], reference)


@pytest.mark.parametrize("estimator, grid, why", [
    (GradientBoostingClassifier(n_iter_no_change=3), {"n_estimators": [5, 10]}, "early stopping"),
    (HistGradientBoostingClassifier(early_stopping=True), {"max_iter": [5, 10]}, "early stopping"),
    (BaggingClassifier(oob_score=True), {"n_estimators": [5, 10]}, "out-of-bag score"),
    (RandomForestClassifier(class_weight="balanced"), {"n_estimators": [5, 10]}, "balanced weights"),
    (RandomForestClassifier(warm_start=True), {"n_estimators": [5, 10]}, "the user's own warm start"),
    (RandomForestClassifier(), {"n_estimators": [5, 10], "warm_start": [False]}, "warm start in the grid"),
    (RandomForestClassifier(), {"max_depth": [2, 3]}, "the count not in the grid"),
    (LogisticRegression(), {"max_iter": [50, 100]}, "not a forest, bagging or boosting model"),
    (type("MyForest", (RandomForestClassifier,), {})(), {"n_estimators": [5, 10]}, "a subclass"),
])
def test_configurations_that_cannot_grow_exactly_are_fitted_alone(estimator, grid, why):
    space = space_from({"family": (estimator, grid)})
    assert growth_chains(space, n_samples=500) == [[0], [1]], why


def test_chains_group_by_the_other_parameters_smallest_count_first():
    space = space_from({
        "forest": (RandomForestClassifier(), {"n_estimators": [30, 10, 20], "max_depth": [2, None]}),
        "histogram": (HistGradientBoostingClassifier(), {"max_iter": [20, 10]}),
        "logistic": (LogisticRegression(), {"C": [1.0]}),
    })
    counts = [(c.family, c.params.get("n_estimators", c.params.get("max_iter")), c.params.get("max_depth"))
              for c in space.candidates]
    chains = [[counts[c] for c in chain] for chain in growth_chains(space, n_samples=500)]
    assert chains == [[("forest", 10, 2), ("forest", 20, 2), ("forest", 30, 2)],
                      [("forest", 10, None), ("forest", 20, None), ("forest", 30, None)],
                      [("histogram", 10, None), ("histogram", 20, None)],
                      [("logistic", None, None)]]
    # Past 10,000 rows a histogram model's early_stopping="auto" turns on, so it no longer grows.
    assert [len(chain) for chain in growth_chains(space, n_samples=10_001)] == [3, 3, 1, 1, 1]
