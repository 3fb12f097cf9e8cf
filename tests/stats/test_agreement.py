"""rank_agreement against scipy.stats.spearmanr and scipy.stats.kendalltau."""

import math

import numpy as np
import pytest
from scipy import stats

from foldwise.stats.agreement import rank_agreement


@pytest.mark.parametrize(("seed", "n"), [(0, 3), (1, 8), (2, 40)])
def test_coefficients_match_scipy(seed, n):
    rng = np.random.default_rng(seed)
    inner = rng.uniform(0.6, 0.9, size=n)
    outer = np.round(inner + rng.normal(0.0, 0.05, size=n), 2)  # rounding makes ties in larger samples
    result = rank_agreement(inner, outer)
    spearman = stats.spearmanr(inner, outer)  # Reference: scipy.stats.spearmanr
    kendall = stats.kendalltau(inner, outer)  # Reference: scipy.stats.kendalltau (tau-b)
    assert (result.spearman_rho, result.spearman_p) == (spearman.statistic, spearman.pvalue)
    assert (result.kendall_tau, result.kendall_p) == (kendall.statistic, kendall.pvalue)
    assert (result.n, result.n_missing, result.note) == (n, 0, "")


def test_nan_pairs_are_dropped_and_counted():
    inner = np.array([0.70, np.nan, 0.80, 0.75, 0.90, 0.85])
    outer = np.array([0.68, 0.70, np.nan, 0.74, 0.86, 0.83])
    result = rank_agreement(inner, outer)
    keep = ~np.isnan(inner) & ~np.isnan(outer)
    # Reference: scipy.stats.spearmanr and kendalltau on the complete pairs.
    assert result.spearman_rho == stats.spearmanr(inner[keep], outer[keep]).statistic
    assert result.kendall_tau == stats.kendalltau(inner[keep], outer[keep]).statistic
    assert (result.n, result.n_missing) == (4, 2)


def test_constant_input_gives_nan_with_a_note_and_no_warning():
    result = rank_agreement([0.8, 0.8, 0.8, 0.8], [0.7, 0.75, 0.72, 0.71])
    assert all(math.isnan(v) for v in (result.spearman_rho, result.spearman_p, result.kendall_tau,
                                       result.kendall_p))
    assert result.note == "inner_mean is constant, so rank correlations are undefined"


def test_fewer_than_three_pairs_are_refused():
    with pytest.raises(ValueError, match=r"needs at least 3 \(inner_mean, outer\) pairs, got 2 \(1 dropped"):
        rank_agreement([0.7, 0.8, np.nan], [0.6, 0.9, 0.8])


def test_vectors_of_different_length_are_refused():
    with pytest.raises(ValueError, match="inner_mean and outer must hold .* same length; got 3 and 4"):
        rank_agreement([0.7, 0.8, 0.9], [0.6, 0.9, 0.8, 0.7])
