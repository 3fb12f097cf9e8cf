"""Each configuration's inner mean and sd per outer fold and metric, kept as a cache as an assessment is stored.

Pages that show fold winners read these rows instead of every inner score: a tenth of the rows for a
10-fold inner loop, and no grouping at read time. The numbers are ``foldwise.definitions``' (NaN, stored
as null, where any inner fit of the group failed); a test checks the cache against that definition.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from foldwise.definitions import SUMMARY_KEYS, inner_summaries
from foldwise.packed import nullable_list

KEYS = SUMMARY_KEYS


def inner_summary_columns(repeat: Sequence[int], outer_fold: Sequence[int], config: Sequence[int],
                          metric: Sequence[int], score) -> dict[str, list]:
    """One row per (repeat, outer_fold, config, metric) present, in that sorted order.

    Returns columns ``KEYS`` plus ``inner_mean`` and ``inner_std`` as the database driver takes them (lists
    of Python numbers, None for SQL's NULL where the definition gives NaN).
    """
    summaries = inner_summaries(repeat, outer_fold, config, metric, np.asarray(score, dtype=float))
    columns = {name: summaries[name].tolist() for name in KEYS}
    return columns | {name: nullable_list(summaries[name]) for name in ("inner_mean", "inner_std")}
