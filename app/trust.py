"""Which classes foldwise loads from a skops file: one rule for the loader and for the runner's check.

Trusted: classes (never functions) of scikit-learn, numpy and builtins; the estimator classes the
assessment recorded for its families; and the classes of the libraries the user named when running it
(``nested_cv(..., trusted=["xgboost"])``, kept in ``design.trusted``), never by default. Anything else
could run code from the file, so it is refused.
"""

from __future__ import annotations

import builtins
import importlib
from collections.abc import Iterable

import skops.io

DEFAULT_PACKAGES = ("sklearn", "numpy")


def refused_types(data: bytes, *, allowed: Iterable[str] = (), libraries: Iterable[str] = ()) -> list[str]:
    """The types of a skops file the loader would refuse (empty: it loads)."""
    allowed, libraries = set(allowed), set(libraries)
    return [name for name in skops.io.get_untrusted_types(data=data)
            if not is_trusted_class(name, allowed, libraries)]


def is_trusted_class(name: str, allowed: set[str], libraries: set[str] = frozenset()) -> bool:
    """A class (never a function) of scikit-learn, numpy, builtins or a named library, or an ``allowed`` class."""
    module, _, attribute = name.rpartition(".")
    if module == "builtins":
        return isinstance(getattr(builtins, attribute, None), type)
    if module.split(".")[0] not in (*DEFAULT_PACKAGES, *libraries) and name not in allowed:
        return False
    try:
        found = getattr(importlib.import_module(module), attribute, None)
    except ImportError:
        return False
    return isinstance(found, type)
