"""Failures confined to what failed: one metric, one fold, one prediction; error_score="raise" stops.

References: scikit-learn's ``GridSearchCV(..., error_score=np.nan)`` (its ``cv_results_``) and
``cross_val_score`` / ``cross_validate`` of it, computed in each test.
"""

from __future__ import annotations

import warnings
from contextlib import contextmanager

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.exceptions import FitFailedWarning
from sklearn.model_selection import GridSearchCV, LeaveOneGroupOut, StratifiedKFold, cross_val_score, cross_validate
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv
from foldwise.payload import AssessmentPayload
from foldwise.runner.journal import JournalMismatch
from foldwise.store import db_url_from, failures_for, get_assessment, insert_assessment, load_payload, make_engine


class NeedsSite(ClassifierMixin, BaseEstimator):
    """A decision tree that refuses to fit unless its training rows include site 0 (the last column)."""

    def __init__(self, max_depth=1):
        self.max_depth = max_depth

    def fit(self, X, y):
        if not np.any(X[:, -1] == 0):
            raise ValueError("no rows of site 0 to calibrate on")
        self.tree_ = DecisionTreeClassifier(max_depth=self.max_depth, random_state=0).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


class NoProbabilities(ClassifierMixin, BaseEstimator):
    """A decision tree whose ``predict_proba`` raises: accuracy can be scored, probabilities not kept."""

    def __init__(self, max_depth=1):
        self.max_depth = max_depth

    def fit(self, X, y):
        self.tree_ = DecisionTreeClassifier(max_depth=self.max_depth, random_state=0).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        raise RuntimeError("probabilities are not calibrated yet")


@contextmanager
def _scikit_learn_quietly():
    """GridSearchCV and cross_validate warn for each failed scorer or fit; these tests expect them."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", "Scoring failed", UserWarning)
        warnings.filterwarnings("ignore", "One or more of the test scores are non-finite", UserWarning)
        warnings.filterwarnings("ignore", category=FitFailedWarning)
        yield


@pytest.fixture
def string_labels(cancer):
    X, y = cancer
    return X, np.where(y == 1, "benign", "malignant")


def test_a_failing_scorer_leaves_the_other_metrics_as_grid_search_does(string_labels):
    X, y = string_labels
    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    # f1 needs pos_label with string labels and raises; roc_auc takes classes_[1] as positive.
    with pytest.warns(RuntimeWarning, match=r"fits lost a metric or their predictions .*: 24 × ValueError: "
                                            r"pos_label=1 is not a valid label"):
        assessment = nested_cv(space, X, y, outer=3, inner=3, scoring=["roc_auc", "f1"], progress=False)

    # Reference: scikit-learn's own nested loop with error_score=np.nan.
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]}, cv=3,
                          scoring=["roc_auc", "f1"], refit="roc_auc", error_score=np.nan)
    with _scikit_learn_quietly():
        reference = cross_validate(search, X, y, cv=3, scoring=["roc_auc", "f1"], error_score=np.nan)
        fitted = [clone(search).fit(X[train], y[train]) for train, _ in StratifiedKFold(3).split(X, y)]

    winners = assessment.winners
    assert_allclose(winners["outer_score"], reference["test_roc_auc"], rtol=0, atol=1e-12)
    assert np.isnan(reference["test_f1"]).all()
    outer = assessment.outer_scores
    assert outer.loc[outer["metric"] == "f1", "score"].isna().all()
    assert outer.loc[outer["metric"] == "roc_auc", "score"].notna().all()
    inner = assessment.inner_scores
    for fold, search_fit in enumerate(fitted):
        for candidate, params in enumerate(search_fit.cv_results_["params"]):
            for metric in ("roc_auc", "f1"):
                rows = inner[(inner["outer_fold"] == fold) & (inner["metric"] == metric)
                             & inner["params"].apply(lambda p, params=params: p == params)]
                expected = [search_fit.cv_results_[f"split{i}_test_{metric}"][candidate] for i in range(3)]
                assert_allclose(rows.sort_values("inner_fold")["score"], expected, rtol=0, atol=1e-12)
        assert winners["params"].iloc[fold] == search_fit.best_params_

    failures = assessment.failures
    assert len(failures) == 3 * 2 * (3 + 1)  # every inner fit and every outer refit lost its f1
    assert set(failures["metric"]) == {"f1"} and set(failures["stage"]) == {"score"}
    assert failures["message"].str.startswith("ValueError: pos_label=1 is not a valid label").all()
    assert not failures["message"].str.contains("Traceback").any()  # the exception, not the whole traceback
    assert failures.loc[failures["level"] == "outer", "inner_fold"].isna().all()
    assert assessment.nested_estimate.n_used == 3


def test_a_fold_where_every_configuration_failed_is_a_failed_fold(cancer, tmp_path):
    X, y = cancer
    site = np.repeat([0, 1, 2], [190, 190, 189])
    X = np.column_stack([X, site])
    space = {"needs_site": (NeedsSite(), {"max_depth": [1, 2]})}
    # Leaving site 0 out, no inner fit (nor the refit) has site 0's rows: that outer fold fails whole.
    with pytest.warns(RuntimeWarning, match=r"Every configuration failed in 1 outer fold \(repeat 0, outer fold 0\): "
                                            r"no fold winner there, and the nested estimate counts it as failed"):
        assessment = nested_cv(space, X, y, outer=LeaveOneGroupOut(), inner=3, groups=site, progress=False)

    payload = assessment.payload
    assert [(c.repeat, c.outer_fold) for c in payload.overall_winners] == [(0, 1), (0, 2)]
    assert [(c.repeat, c.outer_fold) for c in payload.family_winners] == [(0, 1), (0, 2)]
    estimate = assessment.nested_estimate
    assert (estimate.n_used, estimate.n_folds, estimate.n_failed) == (2, 3, 1)
    assert estimate.described == "over 2 of 3 outer folds (1 failed)"
    # Reference: scikit-learn's nested loop; its search fails in fold 0, whose outer score is then NaN.
    search = GridSearchCV(NeedsSite(), {"max_depth": [1, 2]}, cv=3, error_score=np.nan)
    with _scikit_learn_quietly():
        reference = cross_val_score(search, X, y, cv=LeaveOneGroupOut(), groups=site, error_score=np.nan)
    assert np.isnan(reference[0]) and np.isfinite(reference[1:]).all()
    assert_allclose(assessment.winners["outer_score"], reference[1:], rtol=0, atol=1e-12)
    assert estimate.mean == pytest.approx(np.mean(reference[1:]), abs=1e-12)
    assert np.isnan(np.mean(reference))  # scikit-learn's mean over every fold: NaN, never the mean of 2

    # Every fit of the failed fold is in the failures, with its message: nothing is silently missing.
    failures = assessment.failures
    in_fold = failures[failures["outer_fold"] == 0]
    assert len(in_fold) == 2 * 3 + 2  # 2 configurations × 3 inner folds, and the 2 refits
    assert set(in_fold["stage"]) == {"fit"} and in_fold["metric"].isna().all()
    assert (in_fold["message"] == "ValueError: no rows of site 0 to calibrate on").all()
    assert (failures["outer_fold"] == 0).all()

    # The payload stays valid, and a store takes it and gives the fold counts back.
    AssessmentPayload.model_validate(payload.model_dump())
    engine = make_engine(db_url_from(str(tmp_path / "store.sqlite")))
    try:
        assert insert_assessment(engine, payload)
        assert get_assessment(engine, assessment.uuid).estimate.described == "over 2 of 3 outer folds (1 failed)"
        assert len(failures_for(engine, assessment.uuid)) == len(failures)
    finally:
        engine.dispose()


def test_the_store_keeps_each_failure_with_its_metric_and_stage(string_labels, tmp_path):
    X, y = string_labels
    space = {"tree": (NoProbabilities(), {"max_depth": [1, 2]})}
    with pytest.warns(RuntimeWarning, match=r"fits lost a metric or their predictions"):
        assessment = nested_cv(space, X, y, outer=3, inner=3, scoring=["accuracy", "f1"], progress=False)
    frame = assessment.failures
    # accuracy is scored from predict; f1 fails (pos_label); the outer predictions fail (predict_proba).
    assert set(zip(frame["stage"], frame["metric"].fillna("-"), strict=True)) == {("score", "f1"), ("predict", "-")}
    assert (frame.loc[frame["stage"] == "predict", "message"]
            == "RuntimeError: probabilities are not calibrated yet").all()
    assert len(frame[frame["stage"] == "predict"]) == 3 * 2 and assessment.payload.predictions == []
    assert assessment.outer_scores.query("metric == 'accuracy'")["score"].notna().all()

    engine = make_engine(db_url_from(str(tmp_path / "store.sqlite")))
    try:
        assert insert_assessment(engine, assessment.payload)
        stored = failures_for(engine, assessment.uuid)
        restored = load_payload(engine, assessment.uuid)
    finally:
        engine.dispose()
    assert restored.failures == assessment.payload.failures
    mine = frame.drop(columns=["params"])
    assert stored.columns.tolist() == mine.columns.tolist()
    for column in mine.columns:
        assert stored[column].tolist() == mine[column].tolist(), column


def test_error_score_raise_stops_at_the_first_failure_with_its_traceback(string_labels, cancer):
    X, y = cancer
    space = {"needs_site": (NeedsSite(), {"max_depth": [1]})}
    X_site = np.column_stack([X, np.ones(len(X))])  # no site 0 anywhere: the first fit raises
    with pytest.raises(ValueError, match="no rows of site 0 to calibrate on") as raised:
        nested_cv(space, X_site, y, outer=3, inner=3, error_score="raise", n_jobs=1, progress=False)
    assert raised.traceback[-1].name == "fit"  # the original frame, not a re-raised summary

    X_text, y_text = string_labels
    tree = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1]})}
    with pytest.raises(ValueError, match="pos_label=1 is not a valid label"):
        nested_cv(tree, X_text, y_text, outer=3, inner=3, scoring=["roc_auc", "f1"], error_score="raise",
                  n_jobs=1, progress=False)
    with pytest.raises(ValueError, match=r"error_score must be np.nan .* or 'raise' .*, got 0"):
        nested_cv(tree, X_text, y_text, error_score=0, progress=False)


def test_the_end_of_run_warning_counts_failures_by_message(string_labels):
    X, y = string_labels
    site = np.repeat([0, 1, 2], [190, 190, 189])
    X = np.column_stack([X, site])
    space = {"needs_site": (NeedsSite(), {"max_depth": [1]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1]})}
    with pytest.warns(RuntimeWarning) as caught:
        nested_cv(space, X, y, outer=LeaveOneGroupOut(), inner=3, groups=site, scoring=["roc_auc", "f1"],
                  progress=False)
    (message,) = [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)]
    # In the fold without site 0: 3 inner fits and the refit of needs_site fail whole; every other fit
    # (2 families × 3 folds × 4 fits, less those 4) loses its f1.
    assert message.startswith("4 of 24 fits failed and were recorded with NaN scores; 20 more fits lost a metric")
    assert "20 × ValueError: pos_label=1 is not a valid label" in message
    assert "4 × ValueError: no rows of site 0 to calibrate on" in message


def test_a_journal_keeps_what_each_fit_lost_and_refuses_a_run_with_other_weights(string_labels, tmp_path):
    X, y = string_labels
    space = {"tree": (NoProbabilities(), {"max_depth": [1, 2]})}
    path = tmp_path / "journal.sqlite"
    options = {"outer": 3, "inner": 3, "scoring": ["accuracy", "f1"], "progress": False, "checkpoint": path}
    with pytest.warns(RuntimeWarning, match="fits lost a metric or their predictions"):
        first = nested_cv(space, X, y, **options)
    with pytest.warns(RuntimeWarning, match="fits lost a metric or their predictions"):
        resumed = nested_cv(space, X, y, **options)  # every fit read back from the journal
    pd.testing.assert_frame_equal(resumed.failures, first.failures)
    pd.testing.assert_frame_equal(resumed.outer_scores, first.outer_scores)
    with pytest.raises(JournalMismatch, match="its options differs"):
        nested_cv(space, X, y, params={"sample_weight": np.ones(len(y))}, **options)
