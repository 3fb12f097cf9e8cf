"""What a configuration is: a complete, canonical description of its parameters, and its id.

A configuration's identity is its family plus :func:`describe` of its parameters: plain values as
they are, estimators and other parameterised objects structurally (their class and their own
``get_params(deep=False)``, described again), numpy arrays by dtype, shape and content, callables by
qualified name, anything else by the digest of its pickled content. Never through ``repr``, which
scikit-learn cuts short with ``...`` past about 700 characters: two long estimators differing deep
inside would otherwise look alike.

Two grid points are one configuration only when their descriptions are equal. The id a page shows
stays the short label ``payload.config_id`` builds from the parameters (``family:{json}``, objects by
their repr); where that label is cut short or two different configurations would share it, the id
gets the first characters of the description's digest, ``label #1a2b3c4d5e``, so it is unique.
Stored assessments keep the ids they were saved with: the store holds ids as text.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import warnings
from typing import Any

import joblib
import numpy as np

from foldwise.payload import config_id

DIGEST_SHOWN = 10  # hex characters of the description's digest added to an id that needs it
_TRUNCATED = "..."  # what scikit-learn's repr puts in place of the middle of a long estimator


def describe(value: Any) -> Any:
    """A JSON-able description of ``value``, equal for two values exactly when they configure alike."""
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        value = float(value)
        return value if math.isfinite(value) else {"float": repr(value)}
    if isinstance(value, list | tuple):
        return {type(value).__name__: [describe(item) for item in value]}
    if isinstance(value, dict):
        return {"dict": [[describe(key), describe(value[key])] for key in sorted(value, key=repr)]}
    if isinstance(value, np.ndarray):
        array = np.ascontiguousarray(value)
        content = hashlib.sha256(array.tobytes()).hexdigest() if array.dtype != object \
            else _digest([describe(item) for item in array.ravel().tolist()])
        return {"ndarray": [str(array.dtype), list(array.shape), content]}
    if isinstance(value, type):
        return {"class": _qualified(value)}
    if hasattr(value, "get_params"):
        return {"object": _qualified(type(value)), "params": describe(value.get_params(deep=False))}
    if isinstance(value, functools.partial):
        return {"partial": [describe(value.func), describe(list(value.args)), describe(value.keywords)]}
    if hasattr(value, "dist") and hasattr(value, "args") and hasattr(value, "kwds"):  # a frozen scipy.stats law
        return {"distribution": [_qualified(type(value.dist)), describe(list(value.args)), describe(value.kwds)]}
    if callable(value) and hasattr(value, "__qualname__"):
        return {"callable": f"{getattr(value, '__module__', '')}.{value.__qualname__}"}
    try:
        content = joblib.hash(value, hash_name="sha1")
    except Exception:  # cannot be pickled: its repr is all there is to compare
        content = repr(value)
    return {"object": _qualified(type(value)), "content": content}


def digest(family: str, params: dict[str, Any]) -> str:
    """sha256 (hex) of a configuration's family and the description of its parameters."""
    return _digest([family, describe(params)])


def identify(family: str, points, *, warn: bool = True) -> list[tuple[dict[str, Any], str, str]]:
    """``(params, id, digest)`` for each distinct configuration of ``points``, in order.

    A point whose description equals an earlier one's is the same configuration: it is dropped, with
    one warning naming them (unless ``warn`` is False: points collected from several searches). Ids are
    the short labels, made unique with a digest where needed."""
    found: dict[str, dict[str, Any]] = {}
    repeated: list[str] = []
    for params in points:
        key = digest(family, params)
        if key in found:
            repeated.append(config_id(family, params))
        else:
            found[key] = dict(params)
    if repeated and warn:
        warnings.warn(f"family {family!r}: {len(repeated)} grid points describe a configuration already in the "
                      f"grid and are run once: {'; '.join(sorted(set(repeated))[:5])}", UserWarning, stacklevel=4)
    labels = {key: config_id(family, params) for key, params in found.items()}
    count: dict[str, int] = {}
    for label in labels.values():
        count[label] = count.get(label, 0) + 1
    return [(params, _unique(labels[key], key, count[labels[key]] > 1 or cut_short(params)), key)
            for key, params in found.items()]


def _unique(label: str, key: str, needs_digest: bool) -> str:
    return label_with_digest(label, key) if needs_digest else label


def label_with_digest(label: str, key: str) -> str:
    return f"{label} #{key[:DIGEST_SHOWN]}"


def cut_short(params: dict[str, Any]) -> bool:
    """Whether the label shows an object by a repr cut short (a long estimator's, a large array's)."""
    return any(not isinstance(value, str) and _TRUNCATED in repr(value) for value in params.values())


def _qualified(kind: type) -> str:
    return f"{kind.__module__}.{kind.__qualname__}"


def _digest(described: Any) -> str:
    text = json.dumps(described, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()
