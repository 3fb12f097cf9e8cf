"""Input checks shared by the statistics: score vectors in, clear errors out."""

from __future__ import annotations

import numpy as np


def score_vector(values, *, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D float array, refusing anything but finite numbers and NaN."""
    try:
        array = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"{name} must be a sequence of numbers (one score per outer fold, NaN for a failed fit); "
            f"got {type(values).__name__} {_preview(values)}"
        ) from exc
    if array.ndim != 1:
        raise ValueError(
            f"{name} must be one-dimensional (one score per outer fold); got an array of shape {array.shape}"
        )
    infinite = np.flatnonzero(np.isinf(array))
    if infinite.size:
        raise ValueError(
            f"{name} holds non-finite values {array[infinite[:3]].tolist()} at positions "
            f"{infinite[:5].tolist()}; scores must be finite numbers, or NaN for a failed fit"
        )
    return array


def paired_scores(a, b, *, names: tuple[str, str] = ("a", "b")) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Check two paired score vectors and drop the pairs where either score is NaN.

    Returns the kept scores of ``a`` and ``b`` and the boolean mask of kept positions.
    """
    first, second = score_vector(a, name=names[0]), score_vector(b, name=names[1])
    if first.shape != second.shape:
        raise ValueError(
            f"{names[0]} and {names[1]} must hold one score per paired outer fold, so the same length; "
            f"got {first.size} and {second.size}"
        )
    keep = ~(np.isnan(first) | np.isnan(second))
    return first[keep], second[keep], keep


def require_pairs(n_kept: int, n_dropped: int, *, minimum: int, what: str,
                  unit: str = "paired outer folds") -> None:
    """Refuse fewer than ``minimum`` complete pairs, saying how many there were and why."""
    if n_kept < minimum:
        dropped = f" ({n_dropped} dropped because a score was NaN)" if n_dropped else ""
        raise ValueError(f"{what} needs at least {minimum} {unit}, got {n_kept}{dropped}")


def is_constant(values: np.ndarray) -> bool:
    """True when every entry equals the first (exact comparison, no tolerance)."""
    return bool(np.all(values == values[0]))


def mean_fold_size(size, name: str, keep: np.ndarray, *, unit: str = "outer fold") -> float:
    """The mean of the kept folds' sizes: ``size`` is one number (taken as the mean) or one per fold.

    ``keep`` is the boolean mask of the folds used; refuses sizes that are not finite and positive.
    """
    try:
        values = np.atleast_1d(np.asarray(size, dtype=float))
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be a fold size or one size per {unit}; got {size!r}") from exc
    if values.ndim != 1 or values.size not in (1, keep.size):
        raise ValueError(f"{name} must be one number (the mean fold size) or one size per {unit} "
                         f"({keep.size}); got an array of shape {values.shape}")
    if not (np.all(np.isfinite(values)) and np.all(values > 0)):
        raise ValueError(f"{name} must hold finite, positive fold sizes; got {values[:5].tolist()}")
    if values.size != 1 and not keep.any():  # no fold used (every fold failed): no mean size either
        return float("nan")
    return float(values[0] if values.size == 1 else np.mean(values[keep]))


def _preview(values) -> str:
    text = repr(values)
    return text if len(text) <= 60 else text[:57] + "..."
