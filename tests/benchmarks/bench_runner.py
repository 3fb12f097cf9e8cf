"""The runner on 2 cores: how busy it keeps them, and its wall time beside scikit-learn's own nested CV.

A space of 16 configurations in four tree-ensemble families on the bundled breast-cancer data
(load_breast_cancer), 5 outer × 4 inner folds: 320 inner fits, plus 80 outer refits (every
configuration) or 20 (the family winners), each fit taking 20–200 ms on one core.

- efficiency: the fits' own CPU times (``time.process_time`` around each fit, as ``run_fit`` records
  them) summed, divided by wall time × cores used;
- against the library: scikit-learn's ``cross_val_score(GridSearchCV(..., n_jobs=cores), cv=outer)``
  per family, the usual way to nest a search, on the same splits and in the same process run.

Three of the families grid over their number of trees and the fourth over its boosting rounds, as
practitioners' grids usually do, so foldwise grows each fold's model through the counts (``grow``,
foldwise.runner.growth) where scikit-learn fits every count afresh; the two must agree on every
family winner's outer score. Timed beside them, as references: foldwise with growing turned off,
and a plain flat joblib pool over every fresh fit, which is what a single pool alone can reach.
The machine is shared, so each way is timed in ``ROUNDS`` interleaved rounds and its fastest round
counts; the share of the cores the run's processes got is printed beside it (well under 1 means other
work took the rest, and the figures say little about foldwise).
"""

from __future__ import annotations

import os
import sys
import time
from contextlib import contextmanager
from pathlib import Path

import joblib
import numpy as np
from _common import Targets, cores
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import (
    ExtraTreesClassifier,
    GradientBoostingClassifier,
    HistGradientBoostingClassifier,
    RandomForestClassifier,
)
from sklearn.metrics import get_scorer
from sklearn.model_selection import GridSearchCV, ParameterGrid, StratifiedKFold, cross_val_score
from threadpoolctl import threadpool_limits

import foldwise
from foldwise.runner import nested

OUTER, INNER, METRIC, ROUNDS = 5, 4, "roc_auc", 3
SPACE = {
    "forest": (RandomForestClassifier(random_state=0), {"n_estimators": [30, 60], "max_depth": [4, None]}),
    "extra trees": (ExtraTreesClassifier(random_state=0), {"n_estimators": [40, 100],
                                                           "max_features": ["sqrt", 0.5]}),
    "boosting": (GradientBoostingClassifier(random_state=0), {"n_estimators": [25, 50],
                                                              "learning_rate": [0.05, 0.2]}),
    "histogram boosting": (HistGradientBoostingClassifier(random_state=0), {"max_iter": [40, 80],
                                                                            "max_leaf_nodes": [7, 31]}),
}


@contextmanager
def fit_cpu_times():
    """Collect the per-fit CPU times of a ``nested_cv`` run.

    ``run_fit`` records each fit's CPU time in its worker; the payload keeps only wall times, so the
    benchmark reads them where the run hands its results to ``build_payload``.
    """
    seen: list[float] = []
    original = nested.build_payload

    def recording(**arguments):
        seen.extend(result.cpu_time for result in arguments["results"].values())
        return original(**arguments)

    nested.build_payload = recording
    try:
        yield seen
    finally:
        nested.build_payload = original


def run_foldwise(X, y, n_jobs: int, *, refit_all: bool, grow: bool = True) -> tuple[float, list[float], object]:
    with fit_cpu_times() as cpu:
        started = time.perf_counter()
        assessment = foldwise.nested_cv(SPACE, X, y, outer=OUTER, inner=INNER, scoring=METRIC, n_jobs=n_jobs,
                                        progress=False, refit_all=refit_all, grow=grow)
        wall = time.perf_counter() - started
    return wall, list(cpu), assessment


def run_library(X, y, n_jobs: int) -> tuple[float, list[np.ndarray]]:
    started = time.perf_counter()
    scores = [cross_val_score(GridSearchCV(estimator, grid, cv=INNER, scoring=METRIC, n_jobs=n_jobs), X, y,
                              cv=OUTER, scoring=METRIC) for estimator, grid in SPACE.values()]
    return time.perf_counter() - started, scores


def _flat_fit(estimator, params, X, y, train, test) -> float:
    started = time.process_time()
    model = clone(estimator).set_params(**params).fit(X[train], y[train])
    get_scorer(METRIC)(model, X[test], y[test])
    return time.process_time() - started


def run_flat_pool(X, y, n_jobs: int) -> tuple[float, list[float]]:
    """Every inner fit and every outer refit as one flat list of joblib tasks: the reference pool."""
    outer = StratifiedKFold(OUTER).split(X, y)
    pairs = []
    for train, test in outer:
        pairs += [(train[a], train[b]) for a, b in StratifiedKFold(INNER).split(X[train], y[train])]
        pairs.append((train, test))
    started = time.perf_counter()
    cpu = joblib.Parallel(n_jobs=n_jobs)(
        joblib.delayed(_flat_fit)(estimator, params, X, y, train, test)
        for train, test in pairs for estimator, grid in SPACE.values() for params in ParameterGrid(grid))
    return time.perf_counter() - started, cpu


def tree_cpu_seconds() -> float:
    """CPU time used so far by this process and its live children (the pool's workers), from /proc."""
    ticks = os.sysconf("SC_CLK_TCK")
    own = os.getpid()
    total = 0.0
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:  # the process ended meanwhile
            continue
        if int(stat.parent.name) == own or int(fields[1]) == own:  # fields[1]: the parent's pid
            total += (int(fields[11]) + int(fields[12])) / ticks  # utime, stime
    return total


def timed(run, n: int) -> tuple[float, tuple]:
    """The run's result, and the share of ``n`` cores its processes got while it ran."""
    cpu, started = tree_cpu_seconds(), time.perf_counter()
    result = run()
    return (tree_cpu_seconds() - cpu) / ((time.perf_counter() - started) * n), result


def main() -> int:
    targets = Targets("runner: efficiency and wall time against scikit-learn")
    n = min(2, cores())
    print(f"load average at the start: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    X, y = load_breast_cancer(return_X_y=True)
    joblib.Parallel(n_jobs=n)(joblib.delayed(sum)([i]) for i in range(4 * n))  # start the workers once

    ways = {"library": lambda: run_library(X, y, n), "all": lambda: run_foldwise(X, y, n, refit_all=True),
            "winners": lambda: run_foldwise(X, y, n, refit_all=False), "flat": lambda: run_flat_pool(X, y, n),
            "fresh": lambda: run_foldwise(X, y, n, refit_all=True, grow=False)}
    best: dict[str, tuple] = {}
    for _ in range(ROUNDS):
        for name, run in ways.items():
            share, result = timed(run, n)
            if name not in best or result[0] < best[name][1][0]:
                best[name] = (share, result)
    library_wall, library_scores = best["library"][1]
    all_wall, all_cpu, assessment = best["all"][1]
    winners_wall, winners_cpu, winners = best["winners"][1]
    flat_wall, flat_cpu = best["flat"][1]
    fresh_wall, fresh_cpu, _ = best["fresh"][1]
    for name, label in (("library", "scikit-learn"), ("all", "foldwise, every configuration refit"),
                        ("winners", "foldwise, family winners refit"), ("flat", "flat joblib pool"),
                        ("fresh", "foldwise without growing, every configuration refit")):
        targets.figure(f"share of the cores the run got: {label}", best[name][0])

    # The two must have computed the same nested estimate: each family's winners, fold by fold.
    for (family, _), reference in zip(SPACE.items(), library_scores, strict=True):
        mine = winners.family_winners
        mine = mine[mine["family"] == family].sort_values(["repeat", "outer_fold"])["outer_score"].to_numpy()
        if not np.allclose(mine, reference, rtol=0, atol=1e-12):
            print(f"foldwise and GridSearchCV disagree on {family}: {mine} vs {reference}")
            return 2

    fits = np.array(fresh_cpu)  # each fit from nothing, as scikit-learn does them
    in_range = float(np.mean((fits >= 0.02) & (fits <= 0.2)))
    print(f"space: {len(assessment.payload.configurations)} configurations, {OUTER} outer × {INNER} inner "
          f"folds; {len(all_cpu)} fits (every configuration refit), {len(winners_cpu)} (family winners "
          f"refit); cores used: {n}")
    targets.figure("fresh fit CPU time, median", float(np.median(fits)), "s")
    targets.figure("fresh fit CPU time, 5th-95th percentile", float(np.percentile(fits, 5)), "s")
    targets.figure("  ... to", float(np.percentile(fits, 95)), "s")
    targets.figure("share of fresh fits taking 20-200 ms", in_range)
    targets.figure("foldwise's CPU time for the fits, growing ÷ fresh", sum(all_cpu) / sum(fresh_cpu))
    targets.figure("scikit-learn cross_val_score(GridSearchCV) wall", library_wall, "s")
    targets.figure("foldwise, every configuration refit, wall", all_wall, "s")
    targets.figure("foldwise, family winners refit, wall", winners_wall, "s")
    targets.figure("flat joblib pool, every configuration refit, wall", flat_wall, "s")
    targets.figure("flat joblib pool efficiency", sum(flat_cpu) / (flat_wall * n))
    targets.figure("flat joblib pool ÷ scikit-learn", flat_wall / library_wall)
    targets.figure("foldwise without growing ÷ scikit-learn, every configuration refit", fresh_wall / library_wall)
    targets.at_least("foldwise efficiency, every configuration refit", sum(all_cpu) / (all_wall * n), 0.90)
    targets.figure("foldwise efficiency, family winners refit", sum(winners_cpu) / (winners_wall * n))
    # What the efficiency would be had the run had the cores to itself: the fits' share of the CPU time
    # its processes did get (the rest went to dispatching, pickling and the main process).
    targets.figure("foldwise fits' share of the run's own CPU time, every configuration refit",
                   sum(all_cpu) / (best["all"][0] * all_wall * n))
    targets.figure("flat joblib pool fits' share of the run's own CPU time",
                   sum(flat_cpu) / (best["flat"][0] * flat_wall * n))
    targets.at_most("foldwise ÷ scikit-learn, every configuration refit", all_wall / library_wall, 0.90)
    targets.at_most("foldwise ÷ scikit-learn, family winners refit", winners_wall / library_wall, 0.80)
    print(f"load average at the end: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return targets.finish()


if __name__ == "__main__":
    with threadpool_limits(limits=1):  # one BLAS/OpenMP thread per process: the pool is the parallelism
        sys.exit(main())
