"""Shared pipeline steps and the journal: wall times beside scikit-learn's nested CV, and the journal's cost.

1. Shared steps (foldwise.runner.prefix). An invented data set, generated here with a fixed seed: 2,400
   pumps of a fleet, 12 standardised sensor readings each, and whether the pump failed within a month
   (a smooth non-linear rule of the readings, plus noise). The pipeline maps the readings through a
   600-component RBF kernel approximation (Nystroem, fixed seed) into a logistic regression; the grid
   is 8 values of C, so every configuration shares the feature map, which costs several times the
   regression. 4 outer × 3 inner folds. Timed in the same process run, in interleaved rounds (fastest of
   each counts), on the same splits:

   - foldwise, family winners refit (the work scikit-learn does) and every configuration refit;
   - scikit-learn's ``cross_val_score(GridSearchCV(pipeline, n_jobs=cores), cv=outer)``;
   - the same with ``Pipeline(memory=joblib.Memory(<fresh directory>))``, which fits each feature map
     once per training set and reads it back for the other configurations.

   Targets: foldwise ÷ scikit-learn ≤ 0.5, and ÷ scikit-learn with memory ≤ 0.9. Both must find the same
   fold winners' outer scores.

2. The journal (foldwise.runner.journal): the runner benchmark's space (tests/benchmarks/bench_runner.py,
   four tree-ensemble families on the bundled breast-cancer data), every configuration refit, with
   ``checkpoint=`` (a fresh file each round) and without, interleaved. Target: ≤ 1.05 × without.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import joblib
import numpy as np
from _common import Targets, cores
from bench_runner import INNER as RUNNER_INNER
from bench_runner import METRIC as RUNNER_METRIC
from bench_runner import OUTER as RUNNER_OUTER
from bench_runner import SPACE as RUNNER_SPACE
from sklearn.datasets import load_breast_cancer
from sklearn.kernel_approximation import Nystroem
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, cross_val_score
from sklearn.pipeline import Pipeline
from threadpoolctl import threadpool_limits

import foldwise
from foldwise.runner.journal import Journal

OUTER, INNER, METRIC, ROUNDS, SEED = 4, 3, "roc_auc", 3, 20261204
GRID = {"model__C": [0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0]}


def pumps(n: int = 2400, seed: int = SEED) -> tuple[np.ndarray, np.ndarray]:
    """The invented fleet: readings, and failure within a month (1) or not (0)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 12))
    risk = np.sin(1.5 * X[:, 0]) + X[:, 1] * X[:, 2] - 0.5 * X[:, 3] ** 2 + 0.3 * X[:, 4:8].sum(axis=1)
    y = (risk + rng.normal(scale=0.7, size=n) > 0).astype(int)
    return X, y


def pipeline(memory=None) -> Pipeline:
    return Pipeline([("features", Nystroem(gamma=0.05, n_components=600, random_state=0)),
                     ("model", LogisticRegression(max_iter=5000))], memory=memory)


def run_foldwise(X, y, n_jobs: int, *, refit_all: bool):
    started = time.perf_counter()
    assessment = foldwise.nested_cv({"kernel logistic": (pipeline(), GRID)}, X, y, outer=OUTER, inner=INNER,
                                    scoring=METRIC, n_jobs=n_jobs, progress=False, refit_all=refit_all)
    return time.perf_counter() - started, assessment


def run_library(X, y, n_jobs: int, *, cached: bool):
    cache = tempfile.mkdtemp(prefix="foldwise-bench-memory-") if cached else None
    try:
        started = time.perf_counter()
        memory = joblib.Memory(cache, verbose=0) if cached else None
        scores = cross_val_score(GridSearchCV(pipeline(memory), GRID, cv=INNER, scoring=METRIC, n_jobs=n_jobs), X, y,
                                 cv=OUTER, scoring=METRIC)
        return time.perf_counter() - started, scores
    finally:
        if cache:
            shutil.rmtree(cache, ignore_errors=True)


def run_runner_space(X, y, n_jobs: int, checkpoint: Path | None):
    """Wall time, and the time the journal's writes took in the main process (0 without one)."""
    writing = [0.0]
    original = Journal.record

    def timed_record(self, results):
        started = time.perf_counter()
        original(self, results)
        writing[0] += time.perf_counter() - started

    Journal.record = timed_record
    try:
        started = time.perf_counter()
        foldwise.nested_cv(RUNNER_SPACE, X, y, outer=RUNNER_OUTER, inner=RUNNER_INNER, scoring=RUNNER_METRIC,
                           n_jobs=n_jobs, progress=False, checkpoint=checkpoint)
        return time.perf_counter() - started, writing[0]
    finally:
        Journal.record = original


def fastest(ways: dict, rounds: int) -> dict[str, tuple]:
    best: dict[str, tuple] = {}
    for _ in range(rounds):
        for name, run in ways.items():
            result = run()
            if name not in best or result[0] < best[name][0]:
                best[name] = result
    return best


def main() -> int:
    targets = Targets("shared pipeline steps against scikit-learn, and the journal's cost")
    n = min(2, cores())
    print(f"load average at the start: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    joblib.Parallel(n_jobs=n)(joblib.delayed(sum)([i]) for i in range(4 * n))  # start the workers once

    X, y = pumps()
    started = time.process_time()
    features = pipeline().steps[0][1].fit_transform(X[: len(X) * 2 // 3], y[: len(y) * 2 // 3])
    map_time = time.process_time() - started
    started = time.process_time()
    LogisticRegression(max_iter=5000).fit(features, y[: len(y) * 2 // 3])
    model_time = time.process_time() - started
    print(f"data: {X.shape[0]} pumps × {X.shape[1]} readings (invented, seed {SEED}), {np.mean(y):.2f} failed; "
          f"{len(GRID['model__C'])} configurations, {OUTER} outer × {INNER} inner folds; cores used: {n}")
    targets.figure("feature map fit, CPU on two thirds of the rows", map_time, "s")
    targets.figure("logistic regression fit on its output, CPU", model_time, "s")

    best = fastest({"winners": lambda: run_foldwise(X, y, n, refit_all=False),
                    "all": lambda: run_foldwise(X, y, n, refit_all=True),
                    "library": lambda: run_library(X, y, n, cached=False),
                    "memory": lambda: run_library(X, y, n, cached=True)}, ROUNDS)
    winners_wall, assessment = best["winners"]
    for name, (_, scores) in (("library", best["library"]), ("memory", best["memory"])):
        mine = assessment.family_winners.sort_values(["repeat", "outer_fold"])["outer_score"].to_numpy()
        if not np.allclose(mine, scores, rtol=0, atol=1e-12):
            print(f"foldwise and GridSearchCV ({name}) disagree: {mine} vs {scores}")
            return 2
    targets.figure("scikit-learn cross_val_score(GridSearchCV) wall", best["library"][0], "s")
    targets.figure("  ... with Pipeline(memory=joblib.Memory(...)) wall", best["memory"][0], "s")
    targets.figure("foldwise, family winners refit, wall", winners_wall, "s")
    targets.figure("foldwise, every configuration refit, wall", best["all"][0], "s")
    targets.at_most("foldwise ÷ scikit-learn", winners_wall / best["library"][0], 0.5)
    targets.at_most("foldwise ÷ scikit-learn with memory", winners_wall / best["memory"][0], 0.9)
    targets.figure("foldwise, every configuration refit ÷ scikit-learn", best["all"][0] / best["library"][0])
    targets.figure("foldwise, every configuration refit ÷ scikit-learn with memory",
                   best["all"][0] / best["memory"][0])

    X, y = load_breast_cancer(return_X_y=True)
    with tempfile.TemporaryDirectory(prefix="foldwise-bench-journal-") as directory:
        rounds = iter(range(10 * ROUNDS))
        best = fastest({"without": lambda: run_runner_space(X, y, n, None),
                        "journal": lambda: run_runner_space(X, y, n, Path(directory) / f"{next(rounds)}.journal")},
                       ROUNDS)
    targets.figure("runner benchmark's space without a journal, wall", best["without"][0], "s")
    targets.figure("  ... with checkpoint=, wall", best["journal"][0], "s")
    targets.at_most("with the journal ÷ without", best["journal"][0] / best["without"][0], 1.05)
    # The same cost measured directly, which other work on the machine disturbs less: the main process's
    # time in the journal's writes (one transaction per job), as a share of the run's wall time.
    targets.figure("journal writes' share of the run's wall time", best["journal"][1] / best["journal"][0])
    print(f"load average at the end: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return targets.finish()


if __name__ == "__main__":
    with threadpool_limits(limits=1):  # one BLAS/OpenMP thread per process: the pool is the parallelism
        sys.exit(main())
