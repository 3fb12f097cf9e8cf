"""Recorder: a nested cross-validation run by hand, recorded, picks the winners the runner picks."""

from __future__ import annotations

import pytest
from numpy.testing import assert_allclose
from sklearn.base import clone
from sklearn.metrics import get_scorer
from sklearn.model_selection import ParameterGrid, StratifiedKFold

from foldwise import Recorder, nested_cv
from foldwise.payload import AssessmentPayload


def _record_by_hand(space, X, y, metric):
    """A plain loop over StratifiedKFold splits, scored with scikit-learn's scorer, nothing from foldwise."""
    scorer = get_scorer(metric)
    recorder = Recorder("by hand", task="classification", metrics=[metric], n_samples=len(y), classes=[0, 1])
    for o, (train, test) in enumerate(StratifiedKFold(3).split(X, y)):
        recorder.outer_fold(0, o, n_train=len(train), test=test, y_true=y[test])
        X_train, y_train = X[train], y[train]
        for i, (fit_rows, score_rows) in enumerate(StratifiedKFold(3).split(X_train, y_train)):
            for family, (estimator, grid) in space.items():
                for params in ParameterGrid(grid):
                    model = clone(estimator).set_params(**params).fit(X_train[fit_rows], y_train[fit_rows])
                    recorder.inner(0, o, i, family=family, params=params,
                                   scores={metric: scorer(model, X_train[score_rows], y_train[score_rows])})
        for family, (estimator, grid) in space.items():
            for params in ParameterGrid(grid):
                model = clone(estimator).set_params(**params).fit(X_train, y_train)
                recorder.outer(0, o, family=family, params=params, scores={metric: scorer(model, X[test], y[test])},
                               predictions=model.predict_proba(X[test]))
    return recorder.finish()


def test_recorded_assessment_picks_the_runners_winners(cancer, classifier_space):
    X, y = cancer
    recorded = _record_by_hand(classifier_space, X, y, "roc_auc")
    run = nested_cv(classifier_space, X, y, outer=3, inner=3, scoring="roc_auc", progress=False)

    for table in ("family_winners", "winners"):
        mine, theirs = getattr(recorded, table), getattr(run, table)
        assert mine["config"].tolist() == theirs["config"].tolist()
        assert_allclose(mine["outer_score"], theirs["outer_score"], rtol=0, atol=1e-12)
        assert_allclose(mine["inner_mean"], theirs["inner_mean"], rtol=0, atol=1e-12)
    design = recorded.payload.design
    assert (design.n_repeats, design.n_outer_folds, design.n_inner_folds) == (1, 3, 3)
    assert design.refit_all
    assert [f.test_indices for f in recorded.payload.outer_folds] == [f.test_indices for f in run.payload.outer_folds]
    # The payload survives the trip through JSON that the client and the store make.
    again = AssessmentPayload.model_validate_json(recorded.payload.model_dump_json())
    assert again.fingerprint() == run.payload.fingerprint()
    assert len(again.predictions) == 3 * 6


def test_recorder_refuses_a_metric_it_was_not_told_of():
    recorder = Recorder("by hand", task="regression", metrics=["r2"], n_samples=10)
    with pytest.raises(ValueError, match=r"scores for metrics \['rmse'\] that the recorder was not told of"):
        recorder.inner(0, 0, 0, family="f", params={}, scores={"rmse": 1.0})


def test_finishing_with_nothing_recorded_is_refused():
    recorder = Recorder("by hand", task="regression", metrics=["r2"], n_samples=10)
    with pytest.raises(ValueError, match=r"nothing to finish: 0 outer folds and 0 inner scores recorded"):
        recorder.finish()
    recorder.outer_fold(0, 0, n_train=5, test=[0, 1])
    with pytest.raises(ValueError, match=r"1 outer folds and 0 inner scores recorded; call outer_fold"):
        recorder.finish()
