"""Assessments whose shape stresses the page layout: the demo's designs and a wide, deep one.

- ``demo_shaped``: the three demo assessments' designs, families and parameter grids (read from
  ``foldwise.demo``, so they follow the demo), recorded with the ``Recorder``. Their scores are seeded
  noise, not fits: the layout depends on names, parameter text and fold counts, and the demo's real fits
  take minutes.
- ``large``: 3 repeats × 10 outer folds × 6 families with long parameter names, recorded the same way.
"""

from __future__ import annotations

import numpy as np
from sklearn.model_selection import ParameterGrid

from foldwise.demo import FAULT_METRICS, YIELD_METRICS, _fault_space, _yield_space
from foldwise.runner.recorder import Recorder


def demo_shaped() -> list:
    """The demo's three designs: grouped 5 folds, 2 repeats × 5 folds, and a 5-fold regression."""
    return [
        recorded("Gearbox faults, folds grouped by turbine (invented fleet, layout copy)", _fault_space(),
                  FAULT_METRICS, n_repeats=1, n_outer=5, n_inner=4, task="classification", seed=1),
        recorded("Gearbox faults, repeated row folds ignoring turbines (invented fleet, layout copy)",
                  _fault_space(small=True), FAULT_METRICS, n_repeats=2, n_outer=5, n_inner=4,
                  task="classification", seed=2),
        recorded("Assay yield (invented enzyme assay, layout copy)", _yield_space(), YIELD_METRICS,
                  n_repeats=1, n_outer=5, n_inner=4, task="regression", seed=3),
    ]


def large():
    """3 repeats × 10 outer folds × 6 families (two configurations each), with long parameter names."""
    space = {
        "logistic regression": (None, {"logisticregression__C": [0.01, 1.0],
                                       "logisticregression__class_weight": [None, "balanced"]}),
        "decision tree": (None, {"max_depth": [2, 4], "min_samples_leaf": [1, 5]}),
        "k-nearest neighbours": (None, {"kneighborsclassifier__n_neighbors": [5, 15],
                                        "kneighborsclassifier__weights": ["uniform", "distance"]}),
        "support vector machine": (None, {"svc__C": [0.1, 10.0], "svc__gamma": ["scale", 0.001]}),
        "gradient boosting": (None, {"learning_rate": [0.05, 0.1], "max_depth": [2, 4],
                                     "max_leaf_nodes": [15, 31]}),
        "random forest": (None, {"max_features": ["sqrt", 0.6], "min_samples_leaf": [3, 10]}),
    }
    return recorded("Large design: 3 repeats × 10 outer folds × 6 families (layout check)", space,
                     ["roc_auc", "average_precision", "neg_brier_score"], n_repeats=3, n_outer=10, n_inner=3,
                     task="classification", seed=4)


def recorded(name, space, metrics, *, n_repeats, n_outer, n_inner, task, seed, fold_seed=None):
    """An assessment recorded with seeded scores; the same ``fold_seed`` gives the same outer folds."""
    rng, folds_rng = np.random.default_rng(seed), np.random.default_rng(seed if fold_seed is None else fold_seed)
    n_samples = 600
    rec = Recorder(name, task=task, metrics=metrics, n_samples=n_samples, dataset="layout copy of the demo design",
                   classes=[0, 1] if task == "classification" else None,
                   prediction_kind="proba" if task == "classification" else "predict")
    configs = [(family, params) for family, (_, grid) in space.items() for params in ParameterGrid(grid)]
    base = {f"{family}{sorted(params.items())}": rng.normal() for family, params in configs}
    for r in range(n_repeats):
        order = folds_rng.permutation(n_samples)
        for o in range(n_outer):
            test = np.sort(order[o::n_outer])
            y_true = rng.integers(0, 2, test.size) if task == "classification" else rng.normal(60, 8, test.size)
            rec.outer_fold(r, o, n_train=n_samples - test.size, test=test, y_true=y_true)
            for family, params in configs:
                level = base[f"{family}{sorted(params.items())}"]
                for i in range(n_inner):
                    rec.inner(r, o, i, family=family, params=params, scores=_scores(metrics, level, rng),
                              fit_time=float(rng.uniform(0.01, 0.5)))
                if task == "classification":
                    predictions = np.column_stack([p := rng.uniform(size=test.size), 1 - p])
                else:
                    predictions = y_true + rng.normal(0, 6, test.size)
                rec.outer(r, o, family=family, params=params, scores=_scores(metrics, level, rng),
                          fit_time=float(rng.uniform(0.01, 0.5)), predictions=predictions)
    return rec.finish()


def _scores(metrics, level, rng) -> dict:
    """Plausible values per metric around a configuration's level (scikit-learn's orientation: neg_* < 0)."""
    scores = {}
    for metric in metrics:
        noise = float(rng.normal(level * 0.02, 0.02))
        if metric == "neg_root_mean_squared_error":
            scores[metric] = -(7.5 - 10 * noise)
        elif metric == "neg_brier_score":
            scores[metric] = -(0.11 - noise)
        elif metric == "r2":
            scores[metric] = 0.7 + noise
        else:
            scores[metric] = min(0.99, 0.82 + noise)
    return scores
