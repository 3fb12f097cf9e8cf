"""Which configuration wins an outer fold, by the rule GridSearchCV uses within a family."""

from __future__ import annotations

import numpy as np


def select_in_fold(inner: np.ndarray, families: list[list[int]]) -> tuple[list[int | None], int | None]:
    """Pick each family's winner and the overall winner of one outer fold.

    Parameters
    ----------
    inner : array of shape (n_configs, n_inner_folds)
        The selection metric's inner scores, NaN where a fit failed or nothing was recorded.
    families : list of lists of config positions, in family order and grid order within each.

    Returns
    -------
    (family winners, one per family or None when all its configurations failed; overall winner)

    Notes
    -----
    Within a family the configuration with the greatest mean inner score wins, ties going to the first
    in grid order, as ``GridSearchCV``'s ``best_index_`` does (its mean is ``np.average`` over the
    splits, used here too so equal inputs give equal floats). A configuration with any failed inner
    fit has a NaN mean and never wins. The overall winner is the best family winner, ties going to
    the first family.
    """
    means = np.average(inner, axis=1)
    family_winners: list[int | None] = []
    for members in families:
        scores = means[members]
        family_winners.append(None if np.isnan(scores).all() else members[int(np.nanargmax(scores))])
    overall, best = None, -np.inf
    for winner in family_winners:
        if winner is not None and means[winner] > best:
            overall, best = winner, means[winner]
    return family_winners, overall
