"""Any scoring scikit-learn accepts: a scorer object, a dict of scorers, a callable.

Reference: ``cross_val_score`` / ``cross_validate`` of ``GridSearchCV(..., scoring=...)`` in scikit-learn,
computed in each test; its ``cv_results_`` for the inner scores.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.metrics import balanced_accuracy_score, fbeta_score, make_scorer, recall_score
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_val_score, cross_validate
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv
from foldwise.payload import AssessmentPayload

GRID = {"max_depth": [1, 2, 4]}
OUTER, INNER = StratifiedKFold(3), StratifiedKFold(3)


def _space():
    return {"tree": (DecisionTreeClassifier(random_state=0), GRID)}


def _winner_scores(assessment, metric):
    outer = assessment.outer_scores
    rows = outer[outer["overall_winner"] & (outer["metric"] == metric)]
    return rows.sort_values(["repeat", "outer_fold"])["score"].to_numpy()


def _assert_inner_equal(assessment, X, y, search, metric, key):
    """Each outer fold's inner scores equal the fitted search's ``cv_results_`` (scikit-learn)."""
    inner = assessment.inner_scores
    for fold, (train, _) in enumerate(OUTER.split(X, y)):
        fitted = search.fit(X[train], y[train])
        assert assessment.winners["params"].iloc[fold] == fitted.best_params_
        for candidate, params in enumerate(fitted.cv_results_["params"]):
            rows = inner[(inner["outer_fold"] == fold) & (inner["metric"] == metric)
                         & inner["params"].apply(lambda p, params=params: p == params)]
            expected = [fitted.cv_results_[f"split{i}_test_{key}"][candidate] for i in range(3)]
            assert_allclose(rows.sort_values("inner_fold")["score"], expected, rtol=0, atol=1e-12)


def test_a_scorer_object_is_named_score_and_equals_scikit_learn(cancer):
    X, y = cancer
    f2 = make_scorer(fbeta_score, beta=2)
    assessment = nested_cv(_space(), X, y, outer=OUTER, inner=INNER, scoring=f2, progress=False)
    assert assessment.payload.design.metrics == ["score"]  # scikit-learn's name: mean_test_score
    assert "fbeta_score" in assessment.payload.design.scorers["score"]
    assert "beta=2" in assessment.payload.design.scorers["score"]
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER, scoring=f2)
    reference = cross_val_score(search, X, y, cv=OUTER, scoring=f2)
    assert_allclose(_winner_scores(assessment, "score"), reference, rtol=0, atol=1e-12)
    _assert_inner_equal(assessment, X, y, search, "score", "score")
    AssessmentPayload.model_validate(assessment.payload.model_dump())


def test_a_dict_of_scorers_takes_its_keys_as_names_and_selects_by_the_first(cancer):
    X, y = cancer
    scoring = {"f2": make_scorer(fbeta_score, beta=2), "recall_malignant": make_scorer(recall_score, pos_label=0),
               "roc_auc": "roc_auc"}
    assessment = nested_cv(_space(), X, y, outer=OUTER, inner=INNER, scoring=scoring, progress=False)
    design = assessment.payload.design
    assert design.metrics == ["f2", "recall_malignant", "roc_auc"]
    assert set(design.scorers) == {"f2", "recall_malignant"}  # roc_auc is scikit-learn's own name
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER, scoring=scoring, refit="f2")
    reference = cross_validate(search, X, y, cv=OUTER, scoring=scoring)
    for metric in scoring:
        assert_allclose(_winner_scores(assessment, metric), reference[f"test_{metric}"], rtol=0, atol=1e-12)
    _assert_inner_equal(assessment, X, y, search, "recall_malignant", "recall_malignant")


def test_a_callable_scorer_equals_scikit_learn(cancer):
    X, y = cancer

    def balanced(estimator, X_test, y_test):
        return balanced_accuracy_score(y_test, estimator.predict(X_test))

    assessment = nested_cv(_space(), X, y, outer=OUTER, inner=INNER, scoring=balanced, progress=False)
    assert assessment.payload.design.metrics == ["score"]
    assert assessment.payload.design.scorers == {"score": balanced.__qualname__}
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER, scoring=balanced)
    reference = cross_val_score(search, X, y, cv=OUTER, scoring=balanced)
    assert_allclose(_winner_scores(assessment, "score"), reference, rtol=0, atol=1e-12)
    _assert_inner_equal(assessment, X, y, search, "score", "score")


def test_a_search_object_s_scorer_and_its_refit_metric_are_used(cancer):
    X, y = cancer
    scoring = {"f2": make_scorer(fbeta_score, beta=2), "accuracy": "accuracy"}
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER, scoring=scoring, refit="accuracy")
    assessment = nested_cv(search, X, y, outer=OUTER, progress=False)
    assert assessment.payload.design.metrics == ["accuracy", "f2"]  # the refit metric selects
    reference = cross_validate(search, X, y, cv=OUTER, scoring=scoring)
    assert_allclose(_winner_scores(assessment, "accuracy"), reference["test_accuracy"], rtol=0, atol=1e-12)
    assert_allclose(_winner_scores(assessment, "f2"), reference["test_f2"], rtol=0, atol=1e-12)

    single = GridSearchCV(DecisionTreeClassifier(random_state=0), GRID, cv=INNER,
                          scoring=make_scorer(fbeta_score, beta=2))
    assessment = nested_cv(single, X, y, outer=OUTER, progress=False)
    assert assessment.payload.design.metrics == ["score"]
    assert_allclose(_winner_scores(assessment, "score"), cross_val_score(single, X, y, cv=OUTER,
                                                                          scoring=single.scoring), rtol=0, atol=1e-12)


def test_a_name_of_scikit_learn_s_for_another_scorer_is_refused(cancer):
    X, y = cancer
    with pytest.raises(ValueError, match=r"scoring\['accuracy'\] is make_scorer\(fbeta_score.*not scikit-learn's "
                                         r"'accuracy' scorer; give it a name of its own"):
        nested_cv(_space(), X, y, scoring={"accuracy": make_scorer(fbeta_score, beta=2)}, progress=False)
    with pytest.raises(TypeError, match=r"scoring\['f2'\] must be a scorer name or a callable"):
        nested_cv(_space(), X, y, scoring={"f2": 2}, progress=False)
    with pytest.raises(ValueError, match="scoring is an empty dict"):
        nested_cv(_space(), X, y, scoring={}, progress=False)


def test_a_callable_giving_several_metrics_is_recorded_as_failed_with_a_way_out(cancer):
    X, y = cancer

    def several(estimator, X_test, y_test):
        return {"a": 1.0, "b": 2.0}

    with pytest.warns(RuntimeWarning, match=r"ValueError: scorer 'score' returned dict, not a number \(a callable "
                                            r"giving several metrics can be passed as a dict of scorers\)"):
        assessment = nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1]})}, X, y,
                               outer=3, inner=3, scoring=several, progress=False)
    assert np.isnan(assessment.nested_estimate.mean) and assessment.nested_estimate.n_used == 0
