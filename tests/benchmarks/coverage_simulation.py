"""How often each interval beside the nested estimate contains the truth: one replication, and its summary.

A replication draws a data set of ``n`` rows from an invented data-generating process (seeded), runs
``foldwise.nested_cv`` on it as a user would (3 repeats × 5 outer × 5 inner folds; the first repeat
alone is the design without repeats, on the same data), and computes every interval from what the
run returned. The truth is the score of the model the procedure ships: the same selection applied
to all ``n`` rows (each configuration's mean score over the inner splitter's folds on the whole
sample, ties to the first, as GridSearchCV's ``best_index_``), the winner refitted on all rows and
scored on an independent sample of ``TRUTH_ROWS`` rows from the same process. The truth is computed
here with scikit-learn alone, apart from foldwise.

Shared by ``bench_coverage.py`` (the full simulation, ``make coverage``) and the seeded miniature in
``tests/stats/test_interval_coverage.py``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from functools import cache

import numpy as np
from sklearn.base import clone
from sklearn.linear_model import Lasso, LogisticRegression, Ridge
from sklearn.metrics import get_scorer
from sklearn.model_selection import KFold, RepeatedKFold, RepeatedStratifiedKFold, StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.stats.intervals import bbc_interval, corrected_t_interval, student_t_spread

TRUTH_ROWS = 50_000
LEVELS = (0.90, 0.95)
METHODS = ("corrected_t", "student_t_spread", "bbc")


@dataclass(frozen=True)
class Process:
    """An invented data-generating process: how to draw rows, the metric, and a small search space."""

    name: str
    task: str  # "classification" or "regression"
    metric: str  # scikit-learn scorer name
    draw: object  # (rng, n) -> X, y
    space: object  # () -> {family: (estimator, grid)}


def _sigmoid(z):
    return 1 / (1 + np.exp(-z))


def _draw_logistic(rng, n):
    X = rng.normal(size=(n, 10))
    beta = np.array([1.0, -0.8, 0.6, 0.4, -0.3, 0.2, 0, 0, 0, 0])
    return X, (rng.random(n) < _sigmoid(X @ beta)).astype(int)


def _draw_nonlinear_classification(rng, n):
    X = rng.uniform(-1, 1, size=(n, 6))
    logit = 4 * (X[:, 0] ** 2 + X[:, 1] ** 2 - 0.6) + 2 * X[:, 0] * X[:, 2] + X[:, 3]
    return X, (rng.random(n) < _sigmoid(logit)).astype(int)


def _draw_sparse_regression(rng, n):
    X = rng.normal(size=(n, 30))
    beta = np.zeros(30)
    beta[:5] = [1.5, -1.0, 0.8, 0.5, -0.4]
    return X, X @ beta + rng.normal(scale=1.5, size=n)


def _draw_nonlinear_regression(rng, n):
    X = rng.normal(size=(n, 8))
    signal = 2 * np.sin(1.5 * X[:, 0]) + X[:, 1] * X[:, 2] + 0.5 * X[:, 3] ** 2 + 0.5 * X[:, 4]
    return X, signal + rng.normal(scale=1.0, size=n)


def _classification_space():
    return {"logistic": (LogisticRegression(max_iter=1000), {"C": [0.05, 1.0]}),
            "knn": (KNeighborsClassifier(), {"n_neighbors": [7, 25]})}


def _nonlinear_classification_space():
    return {"logistic": (LogisticRegression(max_iter=1000), {"C": [0.1, 1.0]}),
            "tree": (DecisionTreeClassifier(min_samples_leaf=5, random_state=0), {"max_depth": [3, 5]})}


def _sparse_regression_space():
    return {"ridge": (Ridge(), {"alpha": [1.0, 30.0]}),
            "lasso": (Lasso(max_iter=5000), {"alpha": [0.05, 0.2]})}


def _nonlinear_regression_space():
    return {"ridge": (Ridge(), {"alpha": [0.1, 10.0]}),
            "knn": (KNeighborsRegressor(), {"n_neighbors": [10, 30]})}


PROCESSES = {p.name: p for p in (
    Process("logistic classification", "classification", "accuracy", _draw_logistic, _classification_space),
    Process("nonlinear classification", "classification", "roc_auc", _draw_nonlinear_classification,
            _nonlinear_classification_space),
    Process("sparse regression", "regression", "neg_mean_squared_error", _draw_sparse_regression,
            _sparse_regression_space),
    Process("nonlinear regression", "regression", "neg_mean_squared_error", _draw_nonlinear_regression,
            _nonlinear_regression_space),
)}


@cache
def _truth_sample(name: str):
    # One independent sample per process, from a seed no replication uses.
    return PROCESSES[name].draw(np.random.default_rng([2026, 15, list(PROCESSES).index(name)]), TRUTH_ROWS)


def replicate(name: str, n: int, seed: int, *, repeats: int = 3, outer: int = 5, inner: int = 5) -> dict:
    """One replication: the intervals of both designs (first repeat alone, all repeats) and the truth."""
    cpu_started = time.process_time()
    process = PROCESSES[name]
    X, y = process.draw(np.random.default_rng([seed, n, list(PROCESSES).index(name)]), n)
    classifier = process.task == "classification"
    splitter = (RepeatedStratifiedKFold if classifier else RepeatedKFold)(
        n_splits=outer, n_repeats=repeats, random_state=seed)
    assessment = foldwise.nested_cv(process.space(), X, y, outer=splitter, inner=inner, scoring=process.metric,
                                    n_jobs=1, progress=False, name=f"{name}, seed {seed}")
    winners = assessment.winners.sort_values(["repeat", "outer_fold"])
    sizes = assessment.outer_scores.drop_duplicates(["repeat", "outer_fold"]).set_index(["repeat", "outer_fold"])
    sizes = sizes.loc[list(zip(winners["repeat"], winners["outer_fold"], strict=True))]
    scores = winners["outer_score"].to_numpy(dtype=float)
    first = winners["repeat"].to_numpy() == 0
    designs = {"single": first, "repeated": np.ones_like(first)}
    result = {"name": name, "n": n, "seed": seed, "truth": _truth(process, X, y, inner), "designs": {}}
    for design, rows in designs.items():
        entry = {"estimate": float(np.nanmean(scores[rows])), "intervals": {}}
        for level in LEVELS:
            found = [corrected_t_interval(scores[rows], n_train=sizes["n_train"].to_numpy()[rows],
                                          n_test=sizes["n_test"].to_numpy()[rows], level=level),
                     student_t_spread(scores[rows], level=level)]
            if design == "single":
                found.append(bbc_interval(*_pooled_predictions(assessment, process), metric=process.metric,
                                          level=level, n_bootstrap=1000, random_state=seed))
            for interval in found:
                entry["intervals"][f"{interval.method}@{level:g}"] = [interval.estimate, interval.low, interval.high]
        result["designs"][design] = entry
    result["cpu_seconds"] = time.process_time() - cpu_started  # this process only: its cost apart from load
    return result


def _truth(process: Process, X, y, inner: int) -> float:
    """The score on the big independent sample of the model the selection procedure ships."""
    cv = (StratifiedKFold if process.task == "classification" else KFold)(n_splits=inner)
    best, best_mean = None, -np.inf
    for estimator, grid in process.space().values():
        for value in next(iter(grid.values())):
            candidate = clone(estimator).set_params(**{next(iter(grid)): value})
            mean = float(np.mean(cross_val_score(candidate, X, y, cv=cv, scoring=process.metric)))
            if mean > best_mean:
                best, best_mean = candidate, mean
    X_big, y_big = _truth_sample(process.name)
    return float(get_scorer(process.metric)(best.fit(X, y), X_big, y_big))


def _pooled_predictions(assessment, process: Process) -> tuple[np.ndarray, np.ndarray]:
    """The first repeat's outer-test predictions of every configuration, one row per data row."""
    payload = assessment.payload
    tests = {(f.repeat, f.outer_fold): (np.asarray(f.test_indices), f.y_true) for f in payload.outer_folds}
    n_rows = payload.design.n_samples
    first = [p for p in payload.predictions if p.repeat == 0]
    n_columns = first[0].n_columns
    pooled = np.full((n_rows, len(payload.configurations), n_columns), np.nan)
    y = np.empty(n_rows)
    for prediction in first:
        rows, y_true = tests[(0, prediction.outer_fold)]
        pooled[rows, prediction.config] = prediction.array()
        y[rows] = y_true
    if process.task == "regression" or n_columns == 1:
        return pooled[:, :, 0], y
    return pooled, y


def summarise(results: list[dict], design: str, method: str, level: float) -> dict | None:
    """Coverage with its Monte-Carlo standard error, mean width and count, over replications."""
    key = f"{method}@{level:g}"
    rows = [(r["truth"], *r["designs"][design]["intervals"][key]) for r in results
            if key in r["designs"][design]["intervals"]]
    if not rows:
        return None
    truth, estimate, low, high = (np.array(column, dtype=float) for column in zip(*rows, strict=True))
    covered = (low <= truth) & (truth <= high)
    coverage = float(np.mean(covered))
    return {"coverage": coverage, "se": float(np.sqrt(coverage * (1 - coverage) / len(rows))),
            "width": float(np.mean(high - low)), "n": len(rows),
            "bias": float(np.mean(estimate - truth)), "bias_se": float(np.std(estimate - truth, ddof=1)
                                                                       / np.sqrt(len(rows)))}
