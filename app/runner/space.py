"""Turn what the user hands the runner into families of configurations.

A space is a dict ``{family: entry}`` whose entries are

- ``(estimator, param_grid)``: every point of the grid, as ``ParameterGrid`` takes it;
- ``(estimator, distributions, n_iter)`` or ``(estimator, distributions, n_iter, random_state)``: random
  search, ``n_iter`` candidates drawn by ``ParameterSampler`` (lists and ``scipy.stats`` distributions,
  as ``RandomizedSearchCV`` takes them). They are drawn once, before any fit, and the same candidates
  run in every outer fold; the payload records them as configurations, with ``n_iter`` and the
  ``random_state`` in ``seeds["drawn candidates"]``. An int ``random_state`` draws the same candidates on every
  call (a checkpointed run can resume only then); None draws afresh;
- a ``GridSearchCV`` or ``RandomizedSearchCV``, expanded into its candidates the same way;

or a bare ``GridSearchCV`` / ``RandomizedSearchCV``, whose family is named after its estimator (the
last step of a pipeline). Configurations are identified by ``foldwise.runner.canonical``.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from numbers import Integral
from typing import Any

from sklearn.base import BaseEstimator
from sklearn.model_selection import GridSearchCV, ParameterGrid, ParameterSampler, RandomizedSearchCV
from sklearn.pipeline import Pipeline

from foldwise.runner.canonical import identify

EXPANDABLE = (GridSearchCV, RandomizedSearchCV)


@dataclass(frozen=True)
class Candidate:
    """One configuration: a family's estimator with one point of its grid."""

    family: str
    params: dict[str, Any]
    id: str


@dataclass(frozen=True)
class Space:
    estimators: dict[str, BaseEstimator]  # family -> unfitted estimator, in the user's order
    candidates: list[Candidate]  # grouped by family, grid order within each
    drawn: dict[str, dict[str, str]] = field(default_factory=dict)  # random-search family -> n_iter, random_state

    def positions_of(self, family: str) -> list[int]:
        return [i for i, candidate in enumerate(self.candidates) if candidate.family == family]


def space_from(space) -> Space:
    """Accept a dict ``{family: entry}`` (see the module's docstring) or a grid / randomized search."""
    if isinstance(space, EXPANDABLE):
        space = {family_name(space.estimator): space}
    if not isinstance(space, dict) or not space:
        raise TypeError("space must be a non-empty dict {family: (estimator, param_grid)} or a "
                        f"GridSearchCV / RandomizedSearchCV, got {type(space).__name__}")
    estimators, candidates, drawn = {}, [], {}
    for family, entry in space.items():
        if not isinstance(family, str) or not family:
            raise TypeError(f"family names must be non-empty strings, got {family!r}")
        if isinstance(entry, EXPANDABLE):
            estimator, points, how = _from_search(entry)
        elif isinstance(entry, tuple | list) and len(entry) == 2:
            estimator, points, how = entry[0], _grid(family, entry[1]), None
        elif isinstance(entry, tuple | list) and len(entry) in (3, 4):
            estimator, points, how = entry[0], *_sampled(family, *entry[1:])
        else:
            raise TypeError(f"space[{family!r}] must be (estimator, param_grid), (estimator, distributions, n_iter"
                            f"[, random_state]) or a GridSearchCV / RandomizedSearchCV, got {_kind(entry)}")
        if not hasattr(estimator, "fit"):
            raise TypeError(f"space[{family!r}][0] must be a scikit-learn estimator, got {estimator!r}")
        estimators[family] = estimator
        candidates += [Candidate(family, params, ident) for params, ident, _ in identify(family, points)]
        if how is not None:
            drawn[family] = how
    return Space(estimators, candidates, drawn)


def family_name(estimator) -> str:
    """A readable family name for an estimator: its class, or its last step's for a pipeline."""
    while isinstance(estimator, Pipeline) and estimator.steps:
        last = estimator.steps[-1][1]
        if last is None or last == "passthrough":
            break
        estimator = last
    return type(estimator).__name__


def _from_search(search: GridSearchCV | RandomizedSearchCV):
    if isinstance(search, GridSearchCV):
        return search.estimator, ParameterGrid(search.param_grid), None
    # RandomizedSearchCV samples with its random_state; an int draws the same candidates in every
    # outer fold, as refitting the search per fold would. A RandomState is copied, as clone copies it
    # for each fold's search, so the user's generator is left as it was.
    return search.estimator, *_sample(search.param_distributions, search.n_iter, search.random_state)


def _grid(family: str, grid):
    laws = [name for point in (grid if isinstance(grid, list) else [grid]) if isinstance(point, dict)
            for name, values in point.items() if hasattr(values, "rvs")]
    if laws:
        raise TypeError(f"space[{family!r}] gives distributions for {sorted(set(laws))}: a grid takes lists of "
                        f"values; for random search give (estimator, distributions, n_iter, random_state)")
    return ParameterGrid(grid or {})


def _sampled(family: str, distributions, n_iter, random_state=None):
    if not isinstance(n_iter, Integral) or isinstance(n_iter, bool) or n_iter < 1:
        raise TypeError(f"space[{family!r}]: n_iter (the third item) must be a positive int, the number of "
                        f"candidates to draw, got {n_iter!r}")
    return _sample(distributions, int(n_iter), random_state)


def _sample(distributions, n_iter: int, random_state):
    points = list(ParameterSampler(distributions, n_iter, random_state=copy.deepcopy(random_state)))
    return points, {"n_iter": str(n_iter), "random_state": repr(random_state)}


def _kind(entry) -> str:
    return f"a {len(entry)}-item {type(entry).__name__}" if isinstance(entry, tuple | list) else type(entry).__name__
