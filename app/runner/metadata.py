"""Fit parameters and other metadata (``params=``), routed and indexed as scikit-learn does.

As ``cross_validate(..., params=...)`` and ``GridSearchCV.fit(X, y, **params)``:

- With metadata routing on (``sklearn.set_config(enable_metadata_routing=True)``), each value goes
  where it is requested: to a family's ``fit`` (``set_fit_request``), to the scorers
  (``set_score_request``) and to the splitters (``groups``); metadata nobody requests is refused with
  scikit-learn's own error. ``groups=`` is then the same as ``params={"groups": ...}``.
- With routing off, ``groups`` goes to the splitters, everything else to every family's ``fit``, and
  ``sample_weight`` also to each scorer that takes it, as ``GridSearchCV`` weighs its inner scores. The
  outer scores are weighted by the same rule, so both levels measure the same thing (where
  ``cross_validate`` without routing would leave its own scorer unweighted).

Values with one entry per row are indexed per split, at both levels, with scikit-learn's
``_check_method_params`` (training rows for ``fit``, test rows for the scorers); others pass as they are.
"""

from __future__ import annotations

import copy
import warnings
from dataclasses import dataclass
from typing import Any

from sklearn.exceptions import UnsetMetadataPassedError
from sklearn.metrics._scorer import _MultimetricScorer
from sklearn.utils.metadata_routing import (
    MetadataRouter,
    MethodMapping,
    _routing_enabled,
    get_routing_for_object,
    process_routing,
)
from sklearn.utils.validation import _check_method_params

from foldwise.runner.scoring import Scoring, accepts_sample_weight

# scikit-learn versions whose several-metric scorer hands sample_weight only to the scorers that take it
# when routing is off; before, it passed every argument to every scorer.
_SCORERS_PICK_WEIGHTS = hasattr(_MultimetricScorer, "_accept_sample_weight")


@dataclass(frozen=True)
class FamilyMetadata:
    """What one family's fits receive, over all rows: ``fit`` for its ``fit``, ``score`` for the scorers."""

    fit: dict[str, Any]
    score: dict[str, Any]

    @property
    def is_empty(self) -> bool:
        return not self.fit and not self.score

    def split(self, X, train, test) -> tuple[dict[str, Any], dict[str, Any]]:
        """The fit parameters of the training rows and the scorers' parameters of the test rows."""
        return (_check_method_params(X, self.fit, indices=train),
                _check_method_params(X, self.score, indices=test))


@dataclass(frozen=True)
class Routed:
    families: dict[str, FamilyMetadata]
    outer_groups: Any  # the groups each splitter is given (None: none)
    inner_groups: Any


def route(params: dict | None, groups, *, estimators: dict, scoring: Scoring, outer_cv, inner_cv) -> Routed:
    """Send ``params`` (and ``groups``) where scikit-learn would send them; see the module's notes."""
    if params is not None and not isinstance(params, dict):
        raise TypeError(f"params must be a dict {{name: value}} of fit parameters or metadata, got "
                        f"{type(params).__name__}")
    params = dict(params or {})
    if groups is not None and "groups" in params:
        raise ValueError("groups is given twice, as groups= and in params; pass it once")
    if _routing_enabled():
        return _routed(params if groups is None else {**params, "groups": groups}, estimators, scoring,
                       outer_cv, inner_cv)
    groups = params.pop("groups", groups)
    weights = params.get("sample_weight")
    score = {}
    if weights is not None:
        if _SCORERS_PICK_WEIGHTS:
            score = {"sample_weight": weights}
            unweighted = [name for name, scorer in scoring.scorers.items() if not accepts_sample_weight(scorer)]
        else:
            unweighted = list(scoring.scorers)
        if unweighted:
            warnings.warn(f"the scorers of {unweighted} take no sample_weight here, so their scores are "
                          f"unweighted; with sklearn.set_config(enable_metadata_routing=True), "
                          f"make_scorer(...).set_score_request(sample_weight=True) weighs them", UserWarning,
                          stacklevel=3)
    same = FamilyMetadata(params, score)
    return Routed(dict.fromkeys(estimators, same), groups, groups)


def _routed(params: dict, estimators: dict, scoring: Scoring, outer_cv, inner_cv) -> Routed:
    names = {family: f"family_{position}" for position, family in enumerate(estimators)}
    router = MetadataRouter(owner="nested_cv")
    router.add(outer_splitter=outer_cv, method_mapping=MethodMapping().add(caller="fit", callee="split"))
    router.add(inner_splitter=inner_cv, method_mapping=MethodMapping().add(caller="fit", callee="split"))
    for family, estimator in estimators.items():
        router.add(**{names[family]: estimator}, method_mapping=MethodMapping().add(caller="fit", callee="fit"))
    router.add(scorer=scoring.combined, method_mapping=MethodMapping().add(caller="fit", callee="score"))
    try:
        routed = process_routing(router, "fit", **params)
    except UnsetMetadataPassedError as error:  # the user called nested_cv, not a fit method
        raise UnsetMetadataPassedError(message=str(error).replace("nested_cv.fit", "nested_cv"),
                                       unrequested_params=error.unrequested_params,
                                       routed_params=error.routed_params) from None
    score = dict(routed.scorer.score)
    families = {family: FamilyMetadata(dict(routed[names[family]].fit), score) for family in estimators}
    # A pipeline or a set of scorers routes on inside each fit; what it would refuse there, refuse now,
    # before hours of fits fail one by one.
    for family, estimator in estimators.items():
        _route_within(f"family {family!r}", estimator, "fit", families[family].fit)
    _route_within(f"the scorers of {scoring.metrics}", scoring.combined, "score", score)
    return Routed(families, routed.outer_splitter.split.get("groups"), routed.inner_splitter.split.get("groups"))


def _route_within(what: str, router, method: str, params: dict) -> None:
    routing = get_routing_for_object(router)
    if not params or not isinstance(routing, MetadataRouter):
        return
    try:
        routing.route_params(params=params, caller=method)
    except UnsetMetadataPassedError as error:
        raise UnsetMetadataPassedError(message=f"{what}: {error}", unrequested_params=error.unrequested_params,
                                       routed_params=error.routed_params) from None


def without_requests(estimator):
    """``estimator``, or where it (or an estimator inside it) holds metadata requests
    (``set_fit_request`` ...), which skops cannot write, a copy without them: they matter to a run's
    routing, not to what is kept of it."""
    if not any("_metadata_request" in vars(part) for part in _parts(estimator)):
        return estimator
    kept = copy.deepcopy(estimator)
    for part in _parts(kept):
        vars(part).pop("_metadata_request", None)
    return kept


def _parts(estimator) -> list:
    """The estimator and every estimator inside it (a pipeline's steps, a search's estimator, ...)."""
    if not hasattr(estimator, "get_params"):
        return []
    inside = [value for value in estimator.get_params(deep=True).values()
              if hasattr(value, "get_params") and not isinstance(value, type)]
    return [estimator, *inside]
