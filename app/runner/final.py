"""The final selection: the same inner selection applied to every row, and its winner refit on every row.

Nested cross-validation estimates how well the *procedure* does — select by the inner loop, then refit
— at this sample size. The model that estimate is about is that procedure run once more on all the data:
the inner splitter over every row, every configuration scored on each inner fold, the winner chosen by
``foldwise.definitions.select_in_fold`` (the rule of every outer fold) and refit on every row. For one
family that is ``GridSearchCV(estimator, grid, cv=inner).fit(X, y)``: the same inner scores, the same
``best_params_``, the same refit model.
"""

from __future__ import annotations

import base64
import time
import warnings

import numpy as np
import skops.io
from sklearn.base import clone
from sklearn.model_selection import check_cv

from foldwise.definitions import select_in_fold
from foldwise.payload import FinalScores, FinalSelection
from foldwise.runner.fitting import FitResult, FitTask
from foldwise.runner.metadata import without_requests
from foldwise.runner.space import Space


def final_splits(X, y, groups, *, inner, classifier: bool) -> tuple[list[tuple[np.ndarray, np.ndarray]], str]:
    """The inner splitter's folds over every row (with every row's group), and its repr."""
    inner_cv = check_cv(inner, y, classifier=classifier)
    with warnings.catch_warnings():  # an ungrouped inner splitter ignores groups on purpose, as in lay_out
        warnings.filterwarnings("ignore", "The groups parameter is ignored", UserWarning)
        splits = [(np.asarray(train), np.asarray(test)) for train, test in inner_cv.split(X, y, groups)]
    return splits, repr(inner_cv)


def final_tasks(splits, n_configs: int) -> list[FitTask]:
    return [FitTask(("final", i, c), c, train, test) for i, (train, test) in enumerate(splits)
            for c in range(n_configs)]


def final_selection(space: Space, splits, inner_splitter: str, results: dict[tuple, FitResult], metrics,
                    X, y, *, keep_model: bool = True, fit_params: dict[str, dict] | None = None,
                    raises: bool = False) -> FinalSelection:
    """Choose by the inner scores of ``results`` (keys ``("final", inner_fold, config)``), refit the winner
    on every row (kept as a skops file unless ``keep_model`` is False) with its family's ``fit_params``
    over every row (``nested_cv(params=...)`` as routed); ``raises`` lets a failing refit propagate."""
    n_configs, n_folds = len(space.candidates), len(splits)
    inner = np.array([[results[("final", i, c)].scores[metrics[0]] for i in range(n_folds)]
                      for c in range(n_configs)])
    chosen = select_in_fold(inner, [space.positions_of(family) for family in space.estimators])
    columns = {name: [] for name in ("inner_fold", "config", "metric", "score", "fit_time", "score_time")}
    failures = []
    for i in range(n_folds):
        for c in range(n_configs):
            result = results[("final", i, c)]
            for position, metric in enumerate(metrics):
                score = result.scores[metric]
                for name, value in (("inner_fold", i), ("config", c), ("metric", position),
                                    ("score", score), ("fit_time", result.fit_time),
                                    ("score_time", result.score_time)):
                    columns[name].append(value)
            if result.error:
                failures.append(f"inner fold {i}, {space.candidates[c].id}: {result.error}")
    model, fit_time, error = None, None, None
    if chosen.overall is not None:
        family = space.candidates[chosen.overall].family
        model, fit_time, error = _refit(space, chosen.overall, X, y, (fit_params or {}).get(family, {}), raises)
    return FinalSelection(
        n_inner_folds=n_folds, inner_splitter=inner_splitter, inner_scores=FinalScores(**{
            name: np.array(values, dtype=np.float64 if name in ("score", "fit_time", "score_time") else np.int64)
            for name, values in columns.items()}),
        family_winners=[c for c in chosen.family if c is not None], config=chosen.overall,
        refit_time=fit_time, refit_error=error,
        model_skops=_skops(model) if model is not None and keep_model else None)


def _refit(space: Space, config: int, X, y, fit_params: dict, raises: bool):
    candidate = space.candidates[config]
    model = clone(space.estimators[candidate.family]).set_params(**clone(candidate.params, safe=False))
    started = time.perf_counter()
    try:
        model.fit(X, y, **fit_params)
    except Exception as error:  # kept as data, as any failed fit: the selection still stands
        if raises:
            raise
        return None, None, f"{type(error).__name__}: {error}"[:10_000]
    return model, time.perf_counter() - started, None


def _skops(model) -> str | None:
    try:
        return base64.b64encode(skops.io.dumps(without_requests(model))).decode("ascii")
    except Exception as error:
        warnings.warn(f"skops could not write the final model ({type(error).__name__}: {error}); its choice "
                      "and scores are kept, the model is not", RuntimeWarning, stacklevel=3)
        return None
