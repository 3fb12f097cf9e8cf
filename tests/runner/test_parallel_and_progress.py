"""One pool for every fit: the same results whatever runs them, and a progress bar only when asked."""

from __future__ import annotations

import os
import threading

import joblib
import numpy as np
import pytest
import sklearn
from pandas.testing import assert_frame_equal
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv

_SCORE_COLUMNS = ["repeat", "outer_fold", "family", "config", "metric", "score"]


class WhereFitted(RegressorMixin, BaseEstimator):
    """Predicts the training mean plus ``shift``; each fit appends its process, thread and
    scikit-learn's ``assume_finite`` setting to the file at ``log``, which any worker can reach."""

    def __init__(self, log="", shift=0.0):
        self.log, self.shift = log, shift

    def fit(self, X, y):
        with open(self.log, "a") as file:
            file.write(f"{os.getpid()} {threading.get_ident()} {sklearn.get_config()['assume_finite']}\n")
        self.mean_ = float(np.mean(y)) + self.shift
        return self

    def predict(self, X):
        return np.full(len(X), self.mean_)


def _fitted_where(log) -> list[tuple[int, int, bool]]:
    lines = [line.split() for line in log.read_text().splitlines()]
    return [(int(pid), int(thread), flag == "True") for pid, thread, flag in lines]


def _same_results(first, second):
    assert len(first.inner_scores) == 3 * 3 * 4 and len(first.outer_scores) == 3 * 4  # nothing compared empty
    for name in ("inner_scores", "outer_scores"):  # every column but the timings
        assert_frame_equal(getattr(first, name)[_SCORE_COLUMNS], getattr(second, name)[_SCORE_COLUMNS])
    assert_frame_equal(first.winners, second.winners)
    assert [(p.outer_fold, p.config, p.data) for p in first.payload.predictions] == \
        [(p.outer_fold, p.config, p.data) for p in second.payload.predictions]


@pytest.fixture(scope="module")
def cancer_module(cancer):
    X, y = cancer
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [0.1, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 3]})}
    return X, y, space


@pytest.fixture(scope="module")
def sequential(cancer_module):
    X, y, space = cancer_module
    return nested_cv(space, X, y, outer=3, inner=3, scoring="roc_auc", n_jobs=1, progress=False)


def test_two_worker_processes_give_the_sequential_results(cancer_module, sequential):
    X, y, space = cancer_module
    parallel = nested_cv(space, X, y, outer=3, inner=3, scoring="roc_auc", n_jobs=2, progress=False)
    _same_results(sequential, parallel)


def test_threading_backend_is_honoured(cancer_module, sequential, tmp_path):
    X, y, space = cancer_module
    with joblib.parallel_config(backend="threading"):
        threaded = nested_cv(space, X, y, outer=3, inner=3, scoring="roc_auc", n_jobs=2, progress=False)
    _same_results(sequential, threaded)

    log = tmp_path / "fits.log"
    rng = np.random.default_rng(0)  # invented data
    X, y = rng.normal(size=(30, 2)), rng.normal(size=30)
    with joblib.parallel_config(backend="threading"):
        nested_cv({"mean": (WhereFitted(str(log)), {"shift": [0.0, 1.0]})}, X, y, outer=2, inner=2, n_jobs=2,
                  progress=False)
    where = _fitted_where(log)
    assert len(where) == 2 * 2 * 2 + 2 * 2
    assert {pid for pid, _, _ in where} == {os.getpid()}  # threads of this process, not worker processes
    assert threading.get_ident() not in {thread for _, thread, _ in where}


def test_worker_processes_see_the_callers_scikit_learn_config(tmp_path):
    log = tmp_path / "fits.log"
    rng = np.random.default_rng(0)  # invented data
    X, y = rng.normal(size=(30, 2)), rng.normal(size=30)
    # scikit-learn's config is thread-local; sklearn.utils.parallel documents carrying it into workers.
    with sklearn.config_context(assume_finite=True):
        nested_cv({"mean": (WhereFitted(str(log)), {"shift": [0.0, 1.0]})}, X, y, outer=2, inner=2, n_jobs=2,
                  progress=False)
    where = _fitted_where(log)
    assert len(where) == 12
    assert os.getpid() not in {pid for pid, _, _ in where}  # the loky default: other processes
    assert all(flag for _, _, flag in where)


def test_no_progress_prints_nothing(capsys, cancer_module):
    X, y, space = cancer_module
    nested_cv(space, X, y, outer=2, inner=2, progress=False)
    captured = capsys.readouterr()
    assert (captured.out, captured.err) == ("", "")


@pytest.mark.parametrize("refit_all", [True, False])
def test_progress_counts_fits_done_of_total(capsys, cancer_module, refit_all):
    X, y, space = cancer_module
    nested_cv(space, X, y, outer=2, inner=2, progress=True, name="bar test", refit_all=refit_all)
    err = capsys.readouterr().err
    # 2 outer x 2 inner x 4 configurations, then the refits: all 4, or the 2 family winners, per outer fold.
    total = 2 * 2 * 4 + 2 * (4 if refit_all else 2)
    assert f"{total}/{total}" in err
    assert "bar test" in err and "fit" in err

