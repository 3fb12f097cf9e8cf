"""params= (fit parameters and metadata), with scikit-learn's metadata routing on and off.

Reference: ``cross_validate(GridSearchCV(...), X, y, cv=outer, params=...)`` and ``GridSearchCV.fit(...,
**params)`` in scikit-learn, computed in each test. Routing is switched on only inside
``sklearn.config_context`` so the global setting never leaks into other tests.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn import config_context
from sklearn.ensemble import RandomForestClassifier
from sklearn.exceptions import UnsetMetadataPassedError
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (scikit-learn's opt-in import)
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, get_scorer, make_scorer
from sklearn.model_selection import (
    GridSearchCV,
    GroupKFold,
    HalvingGridSearchCV,
    StratifiedKFold,
    check_cv,
    cross_validate,
)
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv

GRID = {"max_depth": [1, 2, 4]}
OUTER, INNER = StratifiedKFold(3), StratifiedKFold(3)


@pytest.fixture(scope="module")
def weighted(cancer):
    """The cancer data with invented case weights (fixed seed): some rows count five times."""
    X, y = cancer
    weights = np.random.default_rng(3).choice([1.0, 5.0], size=len(y), p=[0.7, 0.3])
    return X, y, weights


def _tree(routing: bool) -> DecisionTreeClassifier:
    tree = DecisionTreeClassifier(random_state=0)
    return tree.set_fit_request(sample_weight=True) if routing else tree



def _outer_winner_scores(assessment, metric):
    outer = assessment.outer_scores
    rows = outer[outer["overall_winner"] & (outer["metric"] == metric)]
    return rows.sort_values(["repeat", "outer_fold"])["score"].to_numpy()


def test_sample_weight_with_routing_on_equals_cross_validate_of_grid_search(weighted):
    X, y, w = weighted
    with config_context(enable_metadata_routing=True):
        # One scorer requests the weights, the other declines them.
        scoring = {"weighted_accuracy": make_scorer(accuracy_score).set_score_request(sample_weight=True),
                   "accuracy": get_scorer("accuracy").set_score_request(sample_weight=False)}
        space = {"tree": (_tree(True), GRID)}
        assessment = nested_cv(space, X, y, outer=OUTER, inner=INNER, scoring=scoring,
                               params={"sample_weight": w}, progress=False)
        search = GridSearchCV(_tree(True), GRID, cv=INNER, scoring=scoring, refit="weighted_accuracy")
        reference = cross_validate(search, X, y, cv=OUTER, scoring=scoring, params={"sample_weight": w},
                                   return_estimator=True)
    for metric in ("weighted_accuracy", "accuracy"):
        assert_allclose(_outer_winner_scores(assessment, metric), reference[f"test_{metric}"], rtol=0, atol=1e-12)
    inner = assessment.inner_scores
    for fold, fitted in enumerate(reference["estimator"]):
        assert assessment.winners["params"].iloc[fold] == fitted.best_params_
        for candidate, params in enumerate(fitted.cv_results_["params"]):
            rows = inner[(inner["outer_fold"] == fold) & (inner["metric"] == "weighted_accuracy")
                         & inner["params"].apply(lambda p, params=params: p == params)]
            expected = [fitted.cv_results_[f"split{i}_test_weighted_accuracy"][candidate] for i in range(3)]
            assert_allclose(rows.sort_values("inner_fold")["score"], expected, rtol=0, atol=1e-12)
    # The weights changed the models and the weighted scores: the check above is not vacuous.
    plain = nested_cv({"tree": (DecisionTreeClassifier(random_state=0), GRID)}, X, y, outer=OUTER, inner=INNER,
                      scoring="accuracy", progress=False)
    assert not np.allclose(_outer_winner_scores(plain, "accuracy"), reference["test_weighted_accuracy"])


def test_sample_weight_with_routing_off_weighs_fits_and_both_levels_of_scores(weighted):
    X, y, w = weighted
    space = {"tree": (DecisionTreeClassifier(random_state=0), GRID)}
    assessment = nested_cv(space, X, y, outer=OUTER, inner=INNER, scoring="accuracy",
                           params={"sample_weight": w}, progress=False)
    # Routing off, scikit-learn's GridSearchCV fits with the weights and weighs the scorers that take them.
    # foldwise weighs the outer score by the same rule: the same as the routed run above, where the
    # estimator and the scorer request the weights (cross_validate with routing on, the reference).
    with config_context(enable_metadata_routing=True):
        scorer = make_scorer(accuracy_score).set_score_request(sample_weight=True)
        search = GridSearchCV(_tree(True), GRID, cv=INNER, scoring=scorer)
        reference = cross_validate(search, X, y, cv=OUTER, scoring=scorer, params={"sample_weight": w},
                                   return_estimator=True)
    assert_allclose(_outer_winner_scores(assessment, "accuracy"), reference["test_score"], rtol=0, atol=1e-12)
    for fold, ((train, test), fitted) in enumerate(zip(OUTER.split(X, y), reference["estimator"], strict=True)):
        by_hand = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER, scoring="accuracy")
        by_hand.fit(X[train], y[train], sample_weight=w[train])  # routing off, as scikit-learn routes it
        assert by_hand.best_params_ == fitted.best_params_ == assessment.winners["params"].iloc[fold]
        expected = get_scorer("accuracy")(by_hand.best_estimator_, X[test], y[test], sample_weight=w[test])
        assert assessment.winners["outer_score"].iloc[fold] == pytest.approx(expected, abs=1e-12)


def test_a_weighted_scorer_sees_each_test_fold_s_own_weights(weighted):
    X, y, w = weighted
    seen = []

    def recording_accuracy(y_true, y_pred, sample_weight=None):
        seen.append(None if sample_weight is None else np.asarray(sample_weight))
        return accuracy_score(y_true, y_pred, sample_weight=sample_weight)

    with config_context(enable_metadata_routing=True):
        space = {"tree": (_tree(True), {"max_depth": [2]})}
        scorer = make_scorer(recording_accuracy).set_score_request(sample_weight=True)
        nested_cv(space, X, y, outer=OUTER, inner=INNER, scoring=scorer, params={"sample_weight": w}, n_jobs=1,
                  progress=False)
    # One call per fit (3 outer folds × (3 inner + 1 refit)), each with the weights of its own test rows.
    expected = []
    for train, test in OUTER.split(X, y):
        expected += [w[train][inner_test] for _, inner_test in INNER.split(X[train], y[train])]
        expected.append(w[test])
    assert len(seen) == len(expected) == 12
    assert sorted(map(tuple, seen)) == sorted(map(tuple, expected))


def test_groups_in_params_reach_the_splitters_that_request_them(cancer):
    X, y = cancer
    groups = np.arange(len(y)) % 19
    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}
    outer, inner = GroupKFold(3), GroupKFold(2)
    with config_context(enable_metadata_routing=True):
        routed = nested_cv(space, X, y, outer=outer, inner=inner, params={"groups": groups}, progress=False)
    by_argument = nested_cv(space, X, y, outer=outer, inner=inner, groups=groups, progress=False)
    assert [f.test_indices for f in routed.payload.outer_folds] == \
        [f.test_indices for f in by_argument.payload.outer_folds]
    assert_allclose(routed.inner_scores["score"], by_argument.inner_scores["score"], rtol=0, atol=0)
    # GroupKFold (scikit-learn) is the reference for the outer folds; no group is on both sides.
    reference = list(check_cv(outer, y, classifier=True).split(X, y, groups))
    for fold, (train, test) in zip(routed.payload.outer_folds, reference, strict=True):
        assert fold.test_indices == test.tolist()
        assert not set(groups[train]) & set(groups[test])
    assert routed.payload.design.grouped


def test_metadata_nobody_requested_is_refused_as_scikit_learn_refuses_it(weighted):
    X, y, w = weighted
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()), {"logisticregression__C": [1.0]})}
    # Refused before any fit, where cross_validate would let every fit fail on it.
    with config_context(enable_metadata_routing=True), \
            pytest.raises(UnsetMetadataPassedError, match=r"family 'logistic': \[sample_weight\] are passed but are "
                                                          r"not explicitly set as requested or not requested for "
                                                          r"StandardScaler.fit_transform"):
        nested_cv(space, X, y, params={"sample_weight": w}, progress=False)
    with config_context(enable_metadata_routing=True), \
            pytest.raises(UnsetMetadataPassedError, match=r"\[sample_weight\] are passed but are not explicitly set "
                                                          r"as requested or not requested for .*nested_cv"):
        nested_cv({"tree": (DecisionTreeClassifier(), {})}, X, y, params={"sample_weight": w}, progress=False)
    with pytest.raises(ValueError, match="groups is given twice, as groups= and in params; pass it once"):
        nested_cv(space, X, y, groups=np.zeros(len(y)), params={"groups": np.zeros(len(y))}, progress=False)
    with pytest.raises(TypeError, match="params must be a dict"):
        nested_cv(space, X, y, params=[w], progress=False)


def test_a_scorer_without_sample_weight_is_named_when_its_scores_stay_unweighted(weighted):
    X, y, w = weighted

    def unweighted(estimator, X_test, y_test):
        return accuracy_score(y_test, estimator.predict(X_test))

    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1]})}
    with pytest.warns(UserWarning, match=r"the scorers of \['score'\] take no sample_weight here, so their scores "
                                         r"are unweighted"):
        nested_cv(space, X, y, outer=3, inner=3, scoring=unweighted, params={"sample_weight": w}, progress=False)


def test_grown_forests_with_sample_weight_equal_fresh_fits(weighted):
    X, y, w = weighted
    space = {"forest": (RandomForestClassifier(random_state=0), {"n_estimators": [3, 6], "max_depth": [2]})}
    grown = nested_cv(space, X, y, outer=3, inner=3, params={"sample_weight": w}, progress=False)
    fresh = nested_cv(space, X, y, outer=3, inner=3, params={"sample_weight": w}, grow=False, progress=False)
    assert_allclose(grown.inner_scores["score"], fresh.inner_scores["score"], rtol=0, atol=0)
    assert_allclose(grown.outer_scores["score"], fresh.outer_scores["score"], rtol=0, atol=0)
    unweighted = nested_cv(space, X, y, outer=3, inner=3, grow=False, progress=False)
    assert not np.array_equal(unweighted.inner_scores["score"], fresh.inner_scores["score"])


def test_params_for_a_search_fitted_whole_are_refused_not_dropped(weighted):
    X, y, w = weighted
    search = HalvingGridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]}, cv=3)
    with pytest.raises(ValueError, match=r"params= and error_score= are not passed into a HalvingGridSearchCV"):
        nested_cv(search, X, y, params={"sample_weight": w}, progress=False)


def test_the_final_selection_fits_with_the_weights_too(weighted):
    X, y, w = weighted
    space = {"tree": (DecisionTreeClassifier(random_state=0), GRID)}
    assessment = nested_cv(space, X, y, outer=3, inner=INNER, params={"sample_weight": w}, final=True, n_jobs=1,
                           progress=False)
    # The reference: GridSearchCV fitted on every row with the weights (routing off, scikit-learn).
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER).fit(X, y, sample_weight=w)
    assert assessment.final_choice.params == search.best_params_
    np.testing.assert_array_equal(assessment.final_model.predict_proba(X), search.best_estimator_.predict_proba(X))
