"""Configurations that differ only in their number of trees or stages, fitted as one growing model.

A forest, bagging or boosting model fitted with ``warm_start=True`` keeps what it has and, fitted again
with a larger count, adds trees or stages to it. scikit-learn draws the added trees' seeds as a fresh
fit of the larger count would (``BaseForest.fit`` and ``BaseBagging._fit`` skip the seeds already
used; gradient boosting keeps its generator between the calls), so the model grown to ``n`` is the
model fitted to ``n`` from nothing: same trees, same predictions, bit for bit (tests/runner/
test_growth.py checks it against fresh fits). A family's configurations that share every other
parameter are so fitted once per fold, at the cost of the largest of them alone.

Only the classes below, used as they are (no subclass), and only in the settings where growing is
exact: no early stopping (it would stop the small model where the large one goes on), no
out-of-bag score in bagging (refused under ``warm_start``), no ``balanced`` class weights in forests
(scikit-learn warns that they are computed on the data of the first fit).
"""

from __future__ import annotations

import copy
import json
import numbers
import time
from collections import defaultdict
from functools import partial

from sklearn.base import clone
from sklearn.ensemble import (
    BaggingClassifier,
    BaggingRegressor,
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    GradientBoostingClassifier,
    GradientBoostingRegressor,
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.pipeline import Pipeline
from sklearn.utils import _safe_indexing

from foldwise.payload import canonical_params
from foldwise.runner.fitting import FitResult, FitTask, fit_and_score
from foldwise.runner.metadata import FamilyMetadata
from foldwise.runner.scoring import Scoring
from foldwise.runner.space import Space

_COUNT = {
    RandomForestClassifier: "n_estimators", RandomForestRegressor: "n_estimators",
    ExtraTreesClassifier: "n_estimators", ExtraTreesRegressor: "n_estimators",
    BaggingClassifier: "n_estimators", BaggingRegressor: "n_estimators",
    GradientBoostingClassifier: "n_estimators", GradientBoostingRegressor: "n_estimators",
    HistGradientBoostingClassifier: "max_iter", HistGradientBoostingRegressor: "max_iter",
}
_HISTOGRAM_AUTO_STOPS_ABOVE = 10_000  # early_stopping="auto" turns on past this many training rows


def growth_chains(space: Space, *, n_samples: int) -> list[list[int]]:
    """Candidate positions grouped into chains that one growing model fits, smallest count first.

    A candidate that cannot grow (another estimator, early stopping on, its count not in the grid)
    is a chain of its own. Chains come in the order of their first candidate.
    """
    groups: dict[tuple, list[tuple[int, int]]] = defaultdict(list)
    for position, candidate in enumerate(space.candidates):
        key = _count_key(space.estimators[candidate.family], candidate.params, n_samples)
        if key is None or not isinstance(candidate.params[key], numbers.Integral):
            groups[("alone", position)].append((0, position))
            continue
        rest = {name: value for name, value in candidate.params.items() if name != key}
        groups[(candidate.family, key, json.dumps(canonical_params(rest), sort_keys=True))].append(
            (int(candidate.params[key]), position))
    chains = [[position for _, position in sorted(members)] for members in groups.values()]
    return sorted(chains, key=min)


def count_parameter(estimator) -> str | None:
    """The parameter, as ``set_params`` names it, that counts the estimator's trees or stages."""
    final, prefix = _final_step(estimator)
    count = _COUNT.get(type(final))
    return None if count is None else prefix + count


def run_chain(tasks: list[FitTask], estimator, params: list[dict], X, y, scoring: Scoring,
              metadata: FamilyMetadata, classes) -> list[FitResult]:
    """Fit one chain's configurations on one fold by growing a single model, recording each step."""
    train, test = tasks[0].train, tasks[0].test
    models = [clone(estimator).set_params(**clone(step, safe=False)) for step in params]
    fit_params, score_params = metadata.split(X, train, test)
    return grow_chain(tasks, models, _safe_indexing(X, train), _safe_indexing(y, train), _safe_indexing(X, test),
                      _safe_indexing(y, test), scoring, classes, fit_params=fit_params, score_params=score_params)


def grow_chain(tasks: list[FitTask], models: list, X_train, y_train, X_test, y_test, scoring: Scoring, classes, *,
               fit_params: dict, score_params: dict, keep=None) -> list[FitResult]:
    """Grow one model through ``models`` (each configuration set up, unfitted, smallest count first).

    Each step's ``fit_time`` is the model's whole fit time, the earlier steps' included (what a fresh
    fit would have taken, near enough); ``inherited_time`` says how much of it the earlier steps took.
    A step that fails is recorded as any failed fit, and the next step starts a fresh model.
    ``keep(task, model)``, if given, maps a finished model to what is kept.
    """
    count, warm = count_parameter(models[0]), _warm_start_parameter(models[0])
    results, model, inherited = [], None, 0.0
    for task, configured in zip(tasks, models, strict=True):
        started_cpu = time.process_time()
        if model is None:
            model, inherited = configured.set_params(**{warm: True}), 0.0
        else:
            model.set_params(**{count: configured.get_params()[count]})
        result = fit_and_score(task, model, X_train, y_train, X_test, y_test, scoring, classes,
                               fit_params=fit_params, score_params=score_params, started_cpu=started_cpu,
                               keep=partial(_kept, task=task, warm=warm, keep=keep))
        result.fit_time += inherited
        result.inherited_time = inherited
        inherited = result.fit_time
        if result.error:
            model = None
        results.append(result)
    return results


def _kept(fitted, *, task, warm: str, keep):
    finished = _finished(fitted, warm)
    return finished if keep is None else keep(task, finished)


def _finished(model, warm: str):
    """A copy of the grown model as a fresh fit would have left it (warm start off), to keep."""
    kept = copy.deepcopy(model)
    kept.set_params(**{warm: False})
    return kept


def _final_step(estimator) -> tuple[object, str]:
    """The model a pipeline ends with (or the estimator itself), and the prefix of its parameters."""
    if isinstance(estimator, Pipeline) and estimator.steps:
        name, final = estimator.steps[-1]
        return final, f"{name}__"
    return estimator, ""


def _warm_start_parameter(estimator) -> str:
    return _final_step(estimator)[1] + "warm_start"


def _count_key(estimator, params: dict, n_samples: int) -> str | None:
    """The grid's count parameter when this configuration grows exactly, else None."""
    key = count_parameter(estimator)
    if key is None or key not in params or _warm_start_parameter(estimator) in params:
        return None
    try:
        configured = clone(estimator).set_params(**clone(params, safe=False))
    except Exception:  # a bad grid point fails as a fit, where its error is recorded
        return None
    return key if _grows_exactly(_final_step(configured)[0], n_samples) else None


def _grows_exactly(model, n_samples: int) -> bool:
    settings = model.get_params(deep=False)
    if settings.get("warm_start"):
        return False
    if isinstance(model, BaggingClassifier | BaggingRegressor):
        return not settings["oob_score"]
    if isinstance(model, GradientBoostingClassifier | GradientBoostingRegressor):
        return settings["n_iter_no_change"] is None
    if isinstance(model, HistGradientBoostingClassifier | HistGradientBoostingRegressor):
        stopping = settings["early_stopping"]
        return stopping is False or (stopping == "auto" and n_samples <= _HISTOGRAM_AUTO_STOPS_ABOVE)
    return settings.get("class_weight") not in ("balanced", "balanced_subsample")
