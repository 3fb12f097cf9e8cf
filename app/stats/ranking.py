r"""Ranking several families over the same outer folds: Friedman's test and Nemenyi's critical difference."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ._arrays import require_pairs

_ALPHA = 0.05

# Two-tailed Nemenyi critical values q_0.05 for k = 2..10 compared families, Demšar (2006), Table 5(a);
# quoted from memory and checked in the tests against the studentized range distribution.
_Q_ALPHA_TABLE = {2: 1.960, 3: 2.343, 4: 2.569, 5: 2.728, 6: 2.850, 7: 2.949, 8: 3.031, 9: 3.102, 10: 3.164}


@dataclass(frozen=True)
class RankingResult:
    """Friedman's test over the blocks, mean ranks (1 = best) and Nemenyi's critical difference."""

    friedman_stat: float  # NaN when the test cannot run (two families, or every block a complete tie)
    friedman_p: float
    mean_ranks: dict[str, float]  # family -> mean rank, in column order
    critical_difference: float  # Nemenyi's CD by its formula, whether or not Friedman's test ran
    n_blocks: int  # complete blocks used
    n_missing: int  # blocks left out because a family's score was NaN
    note: str  # why the test cannot run; empty when it ran

    @property
    def tested_critical_difference(self) -> float:
        """The CD to compare mean ranks with: NaN when Friedman's test could not run, since Nemenyi's
        comparisons follow only from it (Demšar, 2006), as ``ranking_verdict`` reads it."""
        return math.nan if math.isnan(self.friedman_p) else self.critical_difference


def rank_families(scores: pd.DataFrame) -> RankingResult:
    r"""Rank families on each paired outer fold, test whether they differ (Friedman) and give Nemenyi's CD.

    Parameters
    ----------
    scores : pandas.DataFrame
        One row per paired outer fold (a block: one repeat and outer fold), one column per family,
        greater is better. Rows with any NaN (a failed fit) are dropped and counted in ``n_missing``.

    Returns
    -------
    RankingResult
        ``friedman_stat``, ``friedman_p`` (NaN with an explaining ``note`` for two families, or when
        every block is a complete tie), ``mean_ranks`` (dict family -> mean rank, in column order),
        ``critical_difference``, ``n_blocks`` (rows used), ``n_missing`` (rows dropped), ``note``
        (empty when there is nothing to add).

    Notes
    -----
    Within each of the :math:`N` blocks the :math:`k` families are ranked, 1 for the best score, ties
    sharing the average rank; :math:`R_j` is family :math:`j`'s mean rank. Friedman's statistic (with
    scipy's correction for ties) is, without ties,

    .. math:: \chi^2_F = \frac{12N}{k(k+1)}\left[\sum_j R_j^2 - \frac{k(k+1)^2}{4}\right],

    compared with :math:`\chi^2_{k-1}` (``scipy.stats.friedmanchisquare``). Two families differ
    significantly by Nemenyi's test when their mean ranks differ by at least

    .. math:: CD = q_\alpha \sqrt{\frac{k(k+1)}{6N}}, \qquad \alpha = 0.05,

    with :math:`q_\alpha` the studentized range quantile divided by :math:`\sqrt 2` (Demšar, 2006,
    Table 5(a) for :math:`k \le 10`; computed with ``scipy.stats.studentized_range`` beyond).

    Demšar (2006) designed these tests for blocks that are independent data sets. Outer folds of one
    data set share training data, so here the p-value and the CD are optimistic; read them as a guide.

    References
    ----------
    Friedman, M. (1937). The use of ranks to avoid the assumption of normality implicit in the
    analysis of variance. Journal of the American Statistical Association 32(200), 675-701.
    Nemenyi, P. B. (1963). Distribution-free multiple comparisons. PhD thesis, Princeton University.
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets. Journal of
    Machine Learning Research 7, 1-30.

    Examples
    --------
    >>> frame = pd.DataFrame({"forest": [0.9, 0.8, 0.85], "tree": [0.7, 0.75, 0.7], "knn": [0.8, 0.78, 0.8]})
    >>> result = rank_families(frame)
    >>> result.mean_ranks
    {'forest': 1.0, 'tree': 3.0, 'knn': 2.0}
    >>> result.n_blocks, round(result.friedman_stat, 6)
    (3, 6.0)
    """
    values, n_missing = _complete_blocks(scores)
    n_blocks, k = values.shape
    ranks = stats.rankdata(-values, method="average", axis=1)
    mean_ranks = {family: float(rank)
                  for family, rank in zip(scores.columns, ranks.mean(axis=0), strict=True)}
    critical_difference = nemenyi_q(k) * math.sqrt(k * (k + 1) / (6 * n_blocks))
    note = ""
    if k < 3:
        statistic = p_value = math.nan
        note = (f"Friedman's test needs three or more families, got {k}; "
                "compare two families with the paired tests instead")
    elif all(np.all(row == row[0]) for row in values):
        statistic = p_value = math.nan
        note = "every family scored the same on every block, so Friedman's statistic is undefined"
    else:
        result = stats.friedmanchisquare(*values.T)
        statistic, p_value = float(result.statistic), float(result.pvalue)
    return RankingResult(friedman_stat=statistic, friedman_p=p_value, mean_ranks=mean_ranks,
                         critical_difference=critical_difference, n_blocks=n_blocks, n_missing=n_missing,
                         note=note)


def ranking_verdict(result: RankingResult) -> str:
    """The ranking in one sentence: which family ranks best and what Friedman's and Nemenyi's tests say of it.

    Friedman's test comes first (Demšar, 2006, recommends Nemenyi's comparisons only after it rejects);
    when it cannot run, the sentence says why and names no critical difference. The level is
    ``alpha = 0.05``; p is written with three significant digits (below 0.001 as "< 0.001").

    >>> frame = pd.DataFrame({"forest": [0.9, 0.8, 0.85], "tree": [0.7, 0.75, 0.7], "knn": [0.8, 0.78, 0.8]})
    >>> print(ranking_verdict(rank_families(frame)))  # doctest: +NORMALIZE_WHITESPACE
    forest ranks best (mean rank 1.00 over 3 outer folds); Friedman's test finds the ranks differ
    (p = 0.0498, α = 0.05) and by Nemenyi's critical difference it is ahead of tree, but not told apart from knn
    """
    order = sorted(result.mean_ranks, key=result.mean_ranks.get)
    best = order[0]
    lead = f"{best} ranks best (mean rank {result.mean_ranks[best]:.2f} over {result.n_blocks} outer folds)"
    if math.isnan(result.friedman_p):
        return f"{lead}; Friedman's test cannot run: {result.note}"
    p = "< 0.001" if result.friedman_p < 0.001 else f"= {result.friedman_p:.3g}"
    if result.friedman_p >= _ALPHA:
        return (f"{lead}, but Friedman's test does not find the families' ranks different (p {p}, α = 0.05): "
                "these outer folds do not tell the families apart")
    behind = [family for family in order[1:]
              if result.mean_ranks[family] - result.mean_ranks[best] >= result.critical_difference]
    close = [family for family in order[1:] if family not in behind]
    found = f"{lead}; Friedman's test finds the ranks differ (p {p}, α = 0.05)"
    if not behind:
        return f"{found}, yet no family is a critical difference behind it, so Nemenyi's test tells none apart"
    told = f"{found} and by Nemenyi's critical difference it is ahead of {', '.join(behind)}"
    return told + (f", but not told apart from {', '.join(close)}" if close else "")


def nemenyi_q(k: int) -> float:
    r"""Two-tailed Nemenyi critical value :math:`q_{0.05}` for ``k`` compared families.

    Parameters
    ----------
    k : int
        Number of families, at least 2.

    Returns
    -------
    float
        :math:`q_{0.05}`: Demšar's (2006) Table 5(a) for ``k <= 10``, else computed.

    Notes
    -----
    :math:`q_\alpha = Q_{1-\alpha}(k, \infty) / \sqrt 2`, with :math:`Q` the studentized range
    distribution with infinite degrees of freedom (``scipy.stats.studentized_range``).

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets. Journal of
    Machine Learning Research 7, 1-30.

    Examples
    --------
    >>> nemenyi_q(4)
    2.569
    >>> round(nemenyi_q(12), 2)
    3.27
    """
    if isinstance(k, bool) or not isinstance(k, int | np.integer) or k < 2:
        raise ValueError(f"k must be a whole number of families, at least 2; got {k!r}")
    if k in _Q_ALPHA_TABLE:
        return _Q_ALPHA_TABLE[k]
    return float(stats.studentized_range.ppf(1 - _ALPHA, k, np.inf) / math.sqrt(2))


def _complete_blocks(scores) -> tuple[np.ndarray, int]:
    if not isinstance(scores, pd.DataFrame):
        raise ValueError("scores must be a pandas DataFrame with one row per paired outer fold and one "
                         f"column per family; got {type(scores).__name__}")
    if scores.shape[1] < 2:
        raise ValueError(f"scores needs at least 2 family columns to rank; got {list(scores.columns)}")
    if not scores.columns.is_unique:
        duplicated = sorted({str(c) for c in scores.columns[scores.columns.duplicated()]})
        raise ValueError(f"scores has repeated family columns {duplicated}; give each family one column")
    try:
        values = scores.to_numpy(dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"scores must hold numbers (NaN for a failed fit); got columns of dtypes "
                         f"{sorted({str(t) for t in scores.dtypes})}") from exc
    if np.isinf(values).any():
        raise ValueError("scores holds infinite values; scores must be finite numbers, "
                         "or NaN for a failed fit")
    complete = ~np.isnan(values).any(axis=1)
    n_missing = int((~complete).sum())
    require_pairs(int(complete.sum()), n_missing, minimum=2, what="rank_families",
                  unit="complete blocks (rows with a score for every family)")
    return values[complete], n_missing
