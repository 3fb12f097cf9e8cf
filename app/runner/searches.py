"""Search objects taken as they are: their ``cv``, ``scoring`` and ``refit`` decide.

A ``GridSearchCV``, ``RandomizedSearchCV``, halving search or any other ``BaseSearchCV`` may be passed
bare (its family named after its estimator, the last step of a pipeline) or as the one entry of a dict,
``{"name": search}``, which names its family. Its ``cv`` is the inner splitter and its scoring (with
``refit`` naming the selecting metric) selects the fold winners. An ``inner=`` or ``scoring=`` beside it
that would change either is refused with a message saying that the search's setting wins and how to
change it; an equal one, or a ``scoring`` that selects by the same metric and records more, is accepted.
Every kind of search object is treated alike.
"""

from __future__ import annotations

from numbers import Integral

from sklearn.base import is_classifier
from sklearn.model_selection._search import BaseSearchCV

from foldwise.runner.scoring import resolve_scoring, selecting_first
from foldwise.runner.space import family_name

_DEFAULT_FOLDS = 5  # scikit-learn's cv=None


def search_in(space) -> tuple[BaseSearchCV | None, str | None]:
    """The search object of ``space`` and its family's name, or ``(None, None)`` for a space of families."""
    if isinstance(space, BaseSearchCV):
        return space, family_name(space.estimator)
    if isinstance(space, dict):
        searches = [family for family, entry in space.items() if isinstance(entry, BaseSearchCV)]
        if searches and len(space) > 1:
            raise TypeError(f"space entries {searches} are search objects beside other families: a search brings "
                            f"its own inner splitter and scoring, so give it alone ({{{searches[0]!r}: search}}), or "
                            f"give its estimator and grid as ({searches[0]!r}: (estimator, param_grid))")
        if searches:
            return space[searches[0]], searches[0]
    return None, None


def search_settings(search: BaseSearchCV, inner, scoring):
    """The inner splitter and scoring a run around ``search`` uses: the search's own, or an equal one given."""
    kind = type(search).__name__
    if inner is not None and not _same_splitter(inner, search.cv):
        raise ValueError(f"{kind}(cv={search.cv!r}) is the inner splitter and wins over inner={inner!r}; leave "
                         f"inner= out, or set the search's own: search.set_params(cv={inner!r})")
    own = selecting_first(search.scoring, search.refit)
    if scoring is None:
        return search.cv, own
    selects = _selecting(search, own)
    if selects is not None:
        classifier = is_classifier(search.estimator)
        given = resolve_scoring(scoring, search.estimator, classifier=classifier)
        first = given.metrics[0]
        if (first, given.custom.get(first)) != selects:
            raise ValueError(
                f"{kind}(scoring={search.scoring!r}, refit={search.refit!r}) selects by {selects[0]!r} and wins "
                f"over scoring={scoring!r}, which names {first!r} first; leave scoring= out, put {selects[0]!r} "
                f"first to record more metrics, or set the search's own: search.set_params(scoring=...)")
    return search.cv, scoring


def _selecting(search: BaseSearchCV, own) -> tuple[str, str | None] | None:
    """The metric the search selects by, as (name, description of a custom scorer); None when a callable
    ``refit`` selects (any scoring may then be recorded beside it)."""
    if callable(search.refit):
        return None
    resolved = resolve_scoring(own, search.estimator, classifier=is_classifier(search.estimator))
    first = resolved.metrics[0]
    return first, resolved.custom.get(first)


def _same_splitter(given, own) -> bool:
    given = _DEFAULT_FOLDS if given is None else given
    own = _DEFAULT_FOLDS if own is None else own
    if isinstance(given, Integral) and isinstance(own, Integral):
        return int(given) == int(own)
    return given is own or (type(given) is type(own) and repr(given) == repr(own))
