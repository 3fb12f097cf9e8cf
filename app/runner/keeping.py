"""keep_models: only models the store's loader will read back are kept, and the user is told which are not.

The loader (``foldwise.ensemble.load_skops``) trusts scikit-learn, numpy and builtin classes, the families'
estimator classes and the classes of the libraries named with ``nested_cv(trusted=[...])`` (the rule of
``foldwise.trust``). At the start of a run each family's estimator is written with skops and checked by
that rule; a family that fails is run as usual but its fold winners are not kept (one warning names the
family and the refused types: ``build_ensemble`` refits its members instead). A fitted model can hold types
its unfitted estimator did not (a booster library's own model class): each kept model is checked again
when the assessment is built, and one warning at the end names those left out.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable

import skops.io

from foldwise.runner.metadata import without_requests
from foldwise.trust import refused_types

REFITS_INSTEAD = ("their fold winners are not kept (build_ensemble refits such members on your data instead); "
                  "to trust a library's own classes name it: nested_cv(..., trusted=['library'])")


def check_trusted(trusted) -> list[str]:
    """``trusted`` as a sorted list of top-level module names, or a TypeError saying what would work."""
    if trusted is None:
        return []
    names = [trusted] if isinstance(trusted, str) else list(trusted)
    bad = [name for name in names if not isinstance(name, str) or not name.isidentifier()]
    if bad:
        raise TypeError(f"trusted must name libraries by their top-level module (e.g. ['xgboost']), got {bad!r}")
    return sorted(set(names))


def estimator_class(estimator) -> str:
    return f"{type(estimator).__module__}.{type(estimator).__qualname__}"


def keepable_families(estimators: dict, trusted: Iterable[str]) -> set[str]:
    """The families whose estimators the loader reads back; one warning names the others and why."""
    allowed = {estimator_class(estimator) for estimator in estimators.values()}
    refused = {family: reason for family, estimator in estimators.items()
               if (reason := refusal(estimator, allowed, trusted)) is not None}
    if refused:
        said = "; ".join(f"{family!r}: {reason}" for family, reason in refused.items())
        warnings.warn(f"keep_models: the store's loader cannot read back the estimators of "
                      f"{len(refused)} {'family' if len(refused) == 1 else 'families'} ({said}), so "
                      + REFITS_INSTEAD, RuntimeWarning, stacklevel=3)
    return set(estimators) - set(refused)


def refusal(model, allowed: set[str], trusted: Iterable[str]) -> str | None:
    """Why the loader would not read ``model`` (or its skops bytes) back; None when it would."""
    try:
        data = model if isinstance(model, bytes) else skops.io.dumps(without_requests(model))
    except Exception as error:  # skops refuses some objects (open files, lambdas)
        return f"skops cannot write it ({type(error).__name__}: {error})"
    types = refused_types(data, allowed=allowed, libraries=trusted)
    return f"holds {types}, which the loader does not trust" if types else None
