"""Turn what the user hands the runner into families of configurations."""

from __future__ import annotations

import copy
from dataclasses import dataclass
from typing import Any

from sklearn.base import BaseEstimator
from sklearn.model_selection import GridSearchCV, ParameterGrid, ParameterSampler, RandomizedSearchCV

from foldwise.payload import config_id


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

    def positions_of(self, family: str) -> list[int]:
        return [i for i, candidate in enumerate(self.candidates) if candidate.family == family]


def space_from(space) -> Space:
    """Accept ``{family: (estimator, param_grid)}`` or a grid / randomized search object."""
    if isinstance(space, GridSearchCV | RandomizedSearchCV):
        return _from_search(space)
    if not isinstance(space, dict) or not space:
        raise TypeError("space must be a non-empty dict {family: (estimator, param_grid)} or a "
                        f"GridSearchCV / RandomizedSearchCV, got {type(space).__name__}")
    estimators, candidates = {}, []
    for family, entry in space.items():
        if not isinstance(family, str) or not family:
            raise TypeError(f"family names must be non-empty strings, got {family!r}")
        if not (isinstance(entry, tuple | list) and len(entry) == 2):
            raise TypeError(f"space[{family!r}] must be (estimator, param_grid), got {type(entry).__name__}")
        estimator, grid = entry
        if not hasattr(estimator, "fit"):
            raise TypeError(f"space[{family!r}][0] must be a scikit-learn estimator, got {estimator!r}")
        estimators[family] = estimator
        candidates += _candidates(family, ParameterGrid(grid or {}))
    return Space(estimators, candidates)


def _from_search(search: GridSearchCV | RandomizedSearchCV) -> Space:
    family = type(search.estimator).__name__
    if isinstance(search, GridSearchCV):
        points = ParameterGrid(search.param_grid)
    else:
        # RandomizedSearchCV samples with its random_state; an int draws the same candidates in
        # every outer fold, as refitting the search per fold would. A RandomState is copied, as clone
        # copies it for each fold's search, so the user's generator is left as it was.
        points = ParameterSampler(search.param_distributions, search.n_iter,
                                  random_state=copy.deepcopy(search.random_state))
    return Space({family: search.estimator}, _candidates(family, points))


def _candidates(family: str, points) -> list[Candidate]:
    candidates, seen = [], set()
    for params in points:
        ident = config_id(family, params)
        if ident in seen:  # a grid given as overlapping dicts names a point twice
            continue
        seen.add(ident)
        candidates.append(Candidate(family, dict(params), ident))
    return candidates
