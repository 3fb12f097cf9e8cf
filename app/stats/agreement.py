r"""How well the inner loop's ranking of configurations agrees with their outer scores."""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import stats

from ._arrays import is_constant, paired_scores, require_pairs


@dataclass(frozen=True)
class AgreementResult:
    """Spearman's and Kendall's rank correlations between inner mean scores and outer scores."""

    spearman_rho: float
    spearman_p: float
    kendall_tau: float
    kendall_p: float
    n: int
    n_missing: int
    note: str


def rank_agreement(inner_mean, outer) -> AgreementResult:
    r"""Rank correlation between configurations' inner-CV mean scores and their outer scores.

    Parameters
    ----------
    inner_mean : array-like of float, shape (n_configs,)
        Each configuration's mean inner-fold score.
    outer : array-like of float, shape (n_configs,)
        The same configurations' outer scores, in the same order. Pairs where either value is NaN
        are dropped and counted in ``n_missing``; at least 3 complete pairs are needed.

    Returns
    -------
    AgreementResult
        ``spearman_rho``, ``spearman_p``, ``kendall_tau`` (tau-b), ``kendall_p`` (two-sided), ``n``
        (pairs used), ``n_missing`` and ``note``. When either side is constant the coefficients are
        undefined: all four numbers are NaN and ``note`` says why (empty otherwise).

    Notes
    -----
    Spearman's :math:`\rho` is Pearson's correlation of the ranks (average ranks for ties);
    Kendall's :math:`\tau_b = (n_c - n_d) / \sqrt{(n_0 - n_1)(n_0 - n_2)}`, with :math:`n_c, n_d` the
    concordant and discordant pairs, :math:`n_0 = n(n-1)/2` and :math:`n_1, n_2` the tied pairs in
    each variable. Both come from ``scipy.stats.spearmanr`` and ``scipy.stats.kendalltau``. A high
    coefficient says the inner loop orders configurations as the outer folds do, so its choice carries
    over; values near zero say the inner ranking is mostly noise. Constant input is detected before
    calling scipy, so no warning is raised.

    References
    ----------
    Spearman, C. (1904). The proof and measurement of association between two things. American
    Journal of Psychology 15(1), 72-101.
    Kendall, M. G. (1938). A new measure of rank correlation. Biometrika 30(1-2), 81-93.

    Examples
    --------
    >>> r = rank_agreement([0.70, 0.75, 0.80, 0.85], [0.68, 0.74, 0.73, 0.82])
    >>> r.n, round(r.spearman_rho, 6), round(r.kendall_tau, 6)
    (4, 0.8, 0.666667)
    """
    inner_kept, outer_kept, keep = paired_scores(inner_mean, outer, names=("inner_mean", "outer"))
    n_missing = int((~keep).sum())
    require_pairs(inner_kept.size, n_missing, minimum=3, what="rank_agreement",
                  unit="(inner_mean, outer) pairs")
    n = int(inner_kept.size)
    constant = [name for name, values in (("inner_mean", inner_kept), ("outer", outer_kept))
                if is_constant(values)]
    if constant:
        note = f"{' and '.join(constant)} is constant, so rank correlations are undefined"
        return AgreementResult(spearman_rho=math.nan, spearman_p=math.nan, kendall_tau=math.nan,
                               kendall_p=math.nan, n=n, n_missing=n_missing, note=note)
    spearman = stats.spearmanr(inner_kept, outer_kept)
    kendall = stats.kendalltau(inner_kept, outer_kept)
    return AgreementResult(spearman_rho=float(spearman.statistic), spearman_p=float(spearman.pvalue),
                           kendall_tau=float(kendall.statistic), kendall_p=float(kendall.pvalue),
                           n=n, n_missing=n_missing, note="")
