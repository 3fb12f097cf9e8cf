"""One fit: clone, set parameters, fit on some rows, score (and predict) on others."""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from sklearn.base import clone
from sklearn.utils import _safe_indexing

from foldwise.runner.metadata import FamilyMetadata
from foldwise.runner.scoring import FitProblem, Scoring, exception_text


@dataclass(frozen=True)
class FitTask:
    key: tuple  # ("inner", outer position, inner fold, config) or ("outer", outer position, config)
    config: int
    train: np.ndarray
    test: np.ndarray
    predict: bool = False
    keep_model: bool = False  # hand the fitted model back (a fold winner whose model the run keeps)


@dataclass
class FitResult:
    key: tuple
    scores: dict[str, float]  # NaN for every metric when the fit failed, for one when its scoring failed
    fit_time: float
    score_time: float
    cpu_time: float
    prediction: tuple[str, np.ndarray] | None = None
    error: str | None = None
    model: object | None = None
    inherited_time: float = 0.0  # of fit_time, what the smaller configurations it grew from took
    problems: tuple[FitProblem, ...] = ()  # metrics that failed, or predictions, in a fit that ran


def run_fit(task: FitTask, estimator, params, X, y, scoring: Scoring, metadata: FamilyMetadata,
            classes) -> FitResult:
    """Fit a fresh clone, so no two fits share state, and record whatever happens."""
    started_cpu = time.process_time()
    try:
        model = clone(estimator).set_params(**clone(params, safe=False))
    except Exception as error:
        if scoring.raises:
            raise
        return _failed(task, error, scoring.metrics, 0.0, 0.0, started_cpu)
    fit_params, score_params = metadata.split(X, task.train, task.test)
    return fit_and_score(task, model, _safe_indexing(X, task.train), _safe_indexing(y, task.train),
                         _safe_indexing(X, task.test), _safe_indexing(y, task.test), scoring, classes,
                         fit_params=fit_params, score_params=score_params, started_cpu=started_cpu)


def fit_and_score(task: FitTask, model, X_train, y_train, X_test, y_test, scoring: Scoring, classes, *,
                  fit_params: dict, score_params: dict, started_cpu: float, keep=None) -> FitResult:
    """Fit ``model`` as it is, score it (and predict) on the test rows; ``keep`` maps it to what is kept.

    A fit that raises leaves NaN for every metric; a scorer that raises, NaN for its metric alone; a
    prediction that fails, no prediction: each is recorded with its stage and message, unless
    ``scoring.error_score`` is "raise", which lets the first failure propagate as it was raised.
    """
    fit_time = 0.0
    try:
        started = time.perf_counter()
        model.fit(X_train, y_train, **fit_params)
        fit_time = time.perf_counter() - started
    except Exception as error:  # a failing fit is data, not a crash: it is kept with its message
        if scoring.raises:
            raise
        return _failed(task, error, scoring.metrics, fit_time, 0.0, started_cpu)
    started = time.perf_counter()
    scores, problems = scoring.score(model, X_test, y_test, score_params)
    prediction = None
    if task.predict:
        try:
            prediction = outer_predictions(model, X_test, classes)
        except Exception as error:
            if scoring.raises:
                raise
            problems.append(FitProblem("predict", None, exception_text(error)))
    score_time = time.perf_counter() - started
    kept = None if not task.keep_model else model if keep is None else keep(model)
    return FitResult(task.key, scores, fit_time, score_time, time.process_time() - started_cpu, prediction,
                     model=kept, problems=tuple(problems))


def _failed(task: FitTask, error: Exception, metrics, fit_time: float, score_time: float,
            started_cpu: float) -> FitResult:
    return FitResult(task.key, dict.fromkeys(metrics, np.nan), fit_time, score_time,
                     time.process_time() - started_cpu, None, exception_text(error))


def outer_predictions(model, X_test, classes) -> tuple[str, np.ndarray]:
    """Class probabilities where the model has them, else decision values, else predictions.

    Probability columns follow the assessment's class order, so folds whose training rows lack a
    class still line up (the missing class gets probability 0).
    """
    if classes is None:
        return "predict", np.asarray(model.predict(X_test), dtype=float)
    if hasattr(model, "predict_proba"):
        proba = np.asarray(model.predict_proba(X_test), dtype=float)
        aligned = np.zeros((proba.shape[0], len(classes)))
        aligned[:, _positions(model.classes_, classes)] = proba
        return "proba", aligned
    if hasattr(model, "decision_function"):
        return "decision", np.asarray(model.decision_function(X_test), dtype=float)
    labels = model.predict(X_test)
    return "predict", _positions(labels, classes).astype(float)


def _positions(labels, classes) -> np.ndarray:
    lookup = {label: position for position, label in enumerate(classes)}
    return np.array([lookup[label] for label in np.asarray(labels).tolist()])
