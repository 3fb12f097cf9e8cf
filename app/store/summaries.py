"""Each configuration's inner mean and sd per outer fold and metric, computed once as an assessment is stored.

Pages that show fold winners read these rows instead of every inner score: a tenth of the rows for a
10-fold inner loop, and no grouping at read time. The numbers are those ``frames.winners_frame``
computes from the scores: the mean leaves failed fits (null scores) out, as pandas' mean does; the sd is
the population sd (ddof=0, as scikit-learn's ``std_test_score``) and is undefined when any inner fit of
the group failed, as ``numpy.std`` of scores holding NaN.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

KEYS = ("repeat", "outer_fold", "config", "metric")


def inner_summary_columns(repeat: Sequence[int], outer_fold: Sequence[int], config: Sequence[int],
                          metric: Sequence[int], score: Sequence[float | None]) -> dict[str, list]:
    """One row per (repeat, outer_fold, config, metric) present, in that sorted order.

    Returns columns ``KEYS`` plus ``inner_mean`` and ``inner_std``, None where undefined.
    """
    given = (repeat, outer_fold, config, metric, score)
    lengths = {name: len(column) for name, column in zip((*KEYS, "score"), given, strict=True)}
    if len(set(lengths.values())) > 1:
        raise ValueError(f"inner score columns must have one length; received lengths {lengths}")
    keys = [np.asarray(column, dtype=np.int64) for column in (repeat, outer_fold, config, metric)]
    scores = np.asarray(score, dtype=float)  # None becomes NaN
    if scores.size == 0:
        return {name: [] for name in (*KEYS, "inner_mean", "inner_std")}
    order = np.lexsort(keys[::-1])
    keys, scores = [column[order] for column in keys], scores[order]
    starts = np.flatnonzero(np.r_[True, np.any([column[1:] != column[:-1] for column in keys], axis=0)])
    sizes = np.diff(np.r_[starts, scores.size])
    scored = ~np.isnan(scores)
    counts = np.add.reduceat(scored.astype(np.int64), starts)
    with np.errstate(invalid="ignore", divide="ignore"):  # a group whose every fit failed has no mean
        mean = np.add.reduceat(np.where(scored, scores, 0.0), starts) / counts
        deviation = scores - np.repeat(mean, sizes)
        std = np.sqrt(np.add.reduceat(deviation * deviation, starts) / sizes)  # NaN when any score is NaN
    columns = {name: column[starts].tolist() for name, column in zip(KEYS, keys, strict=True)}
    return columns | {"inner_mean": _nullable(mean), "inner_std": _nullable(std)}


def _nullable(values: np.ndarray) -> list[float | None]:
    return [None if value != value else value for value in values.tolist()]
