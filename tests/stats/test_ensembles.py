"""Scoring averaged stored predictions against scikit-learn's own voting ensembles.

Reference: scikit-learn's VotingClassifier (soft and hard) and VotingRegressor, fitted on each training
fold and scored with sklearn.metrics.get_scorer on the test fold; data: scikit-learn's bundled breast
cancer, wine and diabetes sets. The members' stored predictions are made as the runner makes them
(foldwise.runner.fitting.outer_predictions), so each check goes store format -> average -> scorer.
"""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine
from sklearn.ensemble import VotingClassifier, VotingRegressor
from sklearn.linear_model import LogisticRegression, Ridge, RidgeClassifier
from sklearn.metrics import get_scorer
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import LinearSVC
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

from foldwise.runner.fitting import outer_predictions
from foldwise.stats import ensembles
from foldwise.stats.ensembles import (
    FoldMembers,
    combine_predictions,
    score_combined,
    score_ensemble,
    voting_for,
)


def _scaled(model):
    return make_pipeline(StandardScaler(), model)


def _folds(members, X, y, cv, classes):
    """Each member fitted on the training rows and its predictions stored as the runner stores them."""
    folds, splits = [], list(cv.split(X, y))
    for i, (train, test) in enumerate(splits):
        stored = [outer_predictions(clone(m).fit(X[train], y[train]), X[test], classes) for m in members]
        folds.append(FoldMembers(0, i, y[test].tolist(), stored))
    return folds, splits


def _voting_scores(voting, X, y, splits, metric):
    return [get_scorer(metric)(clone(voting).fit(X[train], y[train]), X[test], y[test])
            for train, test in splits]


def _scores_of(result, metric):
    frame = result.scores[result.scores["metric"] == metric].sort_values("outer_fold")
    return frame["score"].to_numpy()


def test_soft_voting_scores_equal_a_fitted_voting_classifier_on_breast_cancer():
    X, y = load_breast_cancer(return_X_y=True)
    members = [_scaled(LogisticRegression(C=0.5, max_iter=2000)),
               DecisionTreeClassifier(max_depth=3, random_state=0),
               _scaled(KNeighborsClassifier(n_neighbors=7))]
    classes = np.unique(y).tolist()
    folds, splits = _folds(members, X, y, StratifiedKFold(4, shuffle=True, random_state=1), classes)
    metrics = ["roc_auc", "accuracy", "neg_log_loss", "f1", "neg_brier_score", "average_precision"]
    result = score_ensemble(folds, task="classification", metrics=metrics, classes=classes)
    assert result.voting == "soft" and result.unavailable == {}
    reference = VotingClassifier([(f"m{i}", m) for i, m in enumerate(members)], voting="soft")
    for metric in metrics:
        expected = _voting_scores(reference, X, y, splits, metric)
        np.testing.assert_allclose(_scores_of(result, metric), expected, rtol=0, atol=1e-9, err_msg=metric)


def test_soft_voting_on_three_classes_equals_the_voting_classifier():
    X, y = load_wine(return_X_y=True)
    members = [_scaled(LogisticRegression(max_iter=2000)),
               DecisionTreeClassifier(max_depth=2, random_state=0)]
    classes = np.unique(y).tolist()
    folds, splits = _folds(members, X, y, StratifiedKFold(3, shuffle=True, random_state=0), classes)
    metrics = ["accuracy", "neg_log_loss", "roc_auc_ovr", "f1_macro"]
    result = score_ensemble(folds, task="classification", metrics=metrics, classes=classes)
    reference = VotingClassifier([(f"m{i}", m) for i, m in enumerate(members)], voting="soft")
    for metric in metrics:
        expected = _voting_scores(reference, X, y, splits, metric)
        np.testing.assert_allclose(_scores_of(result, metric), expected, rtol=0, atol=1e-9, err_msg=metric)


def test_hard_voting_equals_the_voting_classifier_and_says_which_metrics_it_cannot_give():
    # Decision values only (RidgeClassifier, LinearSVC) beside probabilities (a tree): hard voting, as
    # VotingClassifier offers no soft voting unless every member has predict_proba. Three classes, so
    # three members can split three ways and the tie rule (first class) is exercised.
    X, y = load_wine(return_X_y=True)
    members = [_scaled(RidgeClassifier(alpha=10.0)), _scaled(LinearSVC(C=0.01)),
               DecisionTreeClassifier(max_depth=1, random_state=0)]
    classes = np.unique(y).tolist()
    folds, splits = _folds(members, X, y, StratifiedKFold(3, shuffle=True, random_state=2), classes)
    result = score_ensemble(folds, task="classification", metrics=["roc_auc_ovr", "accuracy", "f1_macro"],
                            classes=classes)
    assert result.voting == "hard"
    assert "roc_auc_ovr" in result.unavailable and "probabilities" in result.unavailable["roc_auc_ovr"]
    reference = VotingClassifier([(f"m{i}", m) for i, m in enumerate(members)], voting="hard")
    for metric in ("accuracy", "f1_macro"):
        expected = _voting_scores(reference, X, y, splits, metric)
        np.testing.assert_allclose(_scores_of(result, metric), expected, rtol=0, atol=1e-9, err_msg=metric)


def test_hard_voting_of_decision_values_on_two_classes_follows_their_sign():
    X, y = load_breast_cancer(return_X_y=True)
    members = [_scaled(RidgeClassifier()), _scaled(LinearSVC(C=0.001)), DecisionTreeClassifier(max_depth=1)]
    classes = [0, 1]
    folds, splits = _folds(members, X, y, StratifiedKFold(3, shuffle=True, random_state=3), classes)
    result = score_ensemble(folds, task="classification", metrics=["balanced_accuracy"], classes=classes)
    reference = VotingClassifier([(f"m{i}", m) for i, m in enumerate(members)], voting="hard")
    expected = _voting_scores(reference, X, y, splits, "balanced_accuracy")
    np.testing.assert_allclose(_scores_of(result, "balanced_accuracy"), expected, rtol=0, atol=1e-9)


def test_mean_of_regressors_equals_a_fitted_voting_regressor_on_diabetes():
    X, y = load_diabetes(return_X_y=True)
    members = [Ridge(alpha=0.5), DecisionTreeRegressor(max_depth=3, random_state=0), KNeighborsRegressor(9)]
    folds, splits = _folds(members, X, y, KFold(4, shuffle=True, random_state=0), None)
    metrics = ["r2", "neg_mean_squared_error", "neg_mean_absolute_error", "neg_median_absolute_error"]
    result = score_ensemble(folds, task="regression", metrics=metrics)
    assert result.voting == "mean"
    reference = VotingRegressor([(f"m{i}", m) for i, m in enumerate(members)])
    for metric in metrics:
        expected = _voting_scores(reference, X, y, splits, metric)
        np.testing.assert_allclose(_scores_of(result, metric), expected, rtol=0, atol=1e-9, err_msg=metric)


def test_a_fold_without_every_members_prediction_scores_nan_and_the_rest_are_kept():
    values = np.array([[0.2, 0.8], [0.9, 0.1]])
    folds = [FoldMembers(0, 0, [1, 0], [("proba", values)]), FoldMembers(0, 1, [1, 0], None)]
    result = score_ensemble(folds, task="classification", metrics=["accuracy"], classes=[0, 1])
    assert result.scores["score"].tolist()[0] == 1.0
    assert np.isnan(result.scores["score"].tolist()[1])


def test_hard_vote_ties_go_to_the_first_class_as_in_bincount_argmax():
    # Common practice, and what VotingClassifier does: np.argmax(np.bincount(labels)) picks the lowest label.
    one_each = [("predict", np.array([[label]])) for label in (2.0, 1.0, 0.0)]
    assert combine_predictions(one_each, voting="hard", n_classes=3).tolist() == [0]
    two_two = one_each[:2] + [("predict", np.array([[2.0]])), ("predict", np.array([[1.0]]))]
    assert combine_predictions(two_two, voting="hard", n_classes=3).tolist() == [1]


def test_bad_input_is_refused_with_what_was_received():
    with pytest.raises(ValueError, match="at least one member"):
        combine_predictions([], voting="soft")
    with pytest.raises(ValueError, match="different numbers of rows"):
        combine_predictions([("proba", np.ones((2, 2))), ("proba", np.ones((3, 2)))], voting="soft")
    with pytest.raises(ValueError, match="'majority'"):
        combine_predictions([("proba", np.ones((2, 2)))], voting="majority")
    with pytest.raises(ValueError, match="not a scikit-learn scorer name"):
        score_combined(np.ones((1, 2)) / 2, [0], voting="soft", metric="acuracy", classes=[0, 1])
    with pytest.raises(ValueError, match=r"kinds \['logits'\]"):
        voting_for(["proba", "logits"], task="classification")
    with pytest.raises(ValueError, match="none of the 1 outer folds"):
        score_ensemble([FoldMembers(0, 0, [1], None)], task="classification", metrics=["accuracy"],
                       classes=[0, 1])
    assert voting_for(["proba", "predict"], task="regression") == "mean"


def test_examples_run():
    results = doctest.testmod(ensembles, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert results.attempted > 0 and results.failed == 0


def test_a_metric_of_the_run_s_own_scorer_is_unavailable_not_a_crash():
    # make_scorer(...) and callables are recorded under names of the user's (runner/scoring.py); the stored
    # predictions cannot say what such a scorer computed, so the ensemble lists it as unavailable.
    X, y = load_breast_cancer(return_X_y=True)
    members = [DecisionTreeClassifier(max_depth=2, random_state=0)]
    classes = np.unique(y).tolist()
    folds, _ = _folds(members, X, y, StratifiedKFold(3), classes)
    result = score_ensemble(folds, task="classification", metrics=["f2", "accuracy"], classes=classes)
    assert "f2" in result.unavailable and "not a scikit-learn scorer name" in result.unavailable["f2"]
    assert set(result.scores["metric"]) == {"accuracy"}
