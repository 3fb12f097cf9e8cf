"""The three paired tests against hand-computed formulas, scipy.stats and baycomp."""

import math

import baycomp
import numpy as np
import pytest
from scipy import stats

from foldwise.stats.paired import bayesian_correlated_ttest, corrected_resampled_ttest, wilcoxon_signed_rank


def _paired_scores(seed, n, shift=0.01, spread=0.02):
    rng = np.random.default_rng(seed)
    b = rng.uniform(0.7, 0.9, size=n)
    a = b + shift + rng.normal(0.0, spread, size=n)
    return a, b


@pytest.mark.parametrize(("seed", "n_folds", "n_repeats", "n_samples"), [(0, 10, 1, 200), (1, 5, 4, 150)])
def test_corrected_ttest_matches_the_formula_and_scipy_ttest_rel(seed, n_folds, n_repeats, n_samples):
    a, b = _paired_scores(seed, n_folds * n_repeats)
    n_test = n_samples / n_folds
    n_train = n_samples - n_test
    result = corrected_resampled_ttest(a, b, n_train=n_train, n_test=n_test)
    d = a - b
    j = d.size
    # Reference: Nadeau and Bengio (2003), repeated k-fold form of Bouckaert and Frank (2004), by hand.
    t_by_hand = d.mean() / math.sqrt((1 / j + n_test / n_train) * d.var(ddof=1))
    assert result.t == pytest.approx(t_by_hand, rel=1e-12)
    assert result.p == pytest.approx(2 * stats.t.sf(abs(t_by_hand), j - 1), rel=1e-10)  # scipy.stats.t.sf
    # Reference: scipy.stats.ttest_rel, whose variance term is var/J, so the two differ by a fixed factor.
    plain = stats.ttest_rel(a, b)
    assert result.t == pytest.approx(plain.statistic / math.sqrt(1 + j * n_test / n_train), rel=1e-12)
    assert (result.df, result.n) == (j - 1, j)
    assert result.mean_diff == pytest.approx(d.mean(), abs=1e-15)
    assert result.sd_diff == pytest.approx(d.std(ddof=1), rel=1e-12)


def test_corrected_ttest_orientation_favours_the_better_first_argument():
    a, b = _paired_scores(2, 10, shift=0.05)
    assert corrected_resampled_ttest(a, b, n_train=90, n_test=10).t > 0
    assert corrected_resampled_ttest(b, a, n_train=90, n_test=10).t < 0


def test_unequal_fold_sizes_are_averaged_over_the_folds_kept():
    a, b = _paired_scores(3, 6)
    n_train = np.array([120, 121, 121, 120, 122, 119])
    n_test = 150 - n_train
    a[2] = np.nan
    result = corrected_resampled_ttest(a, b, n_train=n_train, n_test=n_test)
    keep = ~np.isnan(a)
    # Independent computation: the formula with the mean sizes of the five folds that have both scores.
    d = (a - b)[keep]
    ratio = n_test[keep].mean() / n_train[keep].mean()
    assert result.n == 5
    assert result.t == pytest.approx(d.mean() / math.sqrt((1 / 5 + ratio) * d.var(ddof=1)), rel=1e-12)
    scalar = corrected_resampled_ttest(a, b, n_train=n_train[keep].mean(), n_test=n_test[keep].mean())
    assert scalar == result


@pytest.mark.parametrize(
    ("seed", "n_folds", "runs", "rope"),
    [(0, 10, 1, 0.01), (4, 5, 10, 0.01), (5, 10, 3, 0.005), (6, 10, 2, 0.05)],
)
def test_bayesian_correlated_ttest_matches_baycomp(seed, n_folds, runs, rope):
    a, b = _paired_scores(seed, n_folds * runs, shift=0.008)
    n_samples = 300
    n_test = n_samples / n_folds
    # baycomp uses rho = 1/n_folds, which equals n_test / (n_train + n_test) for equal k-fold splits.
    rho = n_test / n_samples
    result = bayesian_correlated_ttest(a, b, rho=rho, rope=rope)
    # Reference: baycomp.CorrelatedTTest (Benavoli et al., 2017). baycomp takes differences y - x, so with
    # x = a, y = b its left probability P(b - a < -rope) is our P(a better).
    p_left, p_rope, p_right = baycomp.CorrelatedTTest.probs(a, b, rope=rope, runs=runs)
    assert (result.p_a, result.p_rope, result.p_b) == pytest.approx((p_left, p_rope, p_right), abs=1e-9)
    posterior = baycomp.CorrelatedTTest(a, b, rope=rope, runs=runs)
    assert result.loc == pytest.approx(-posterior.mean, abs=1e-12)
    assert result.scale == pytest.approx(math.sqrt(posterior.var), rel=1e-9)
    assert result.df == posterior.df == a.size - 1


def test_bayesian_correlated_ttest_matches_scipy_t_cdf():
    a, b = _paired_scores(7, 20)
    rho, rope = 0.1, 0.01
    result = bayesian_correlated_ttest(a, b, rho=rho, rope=rope)
    d = a - b
    j = d.size
    # Reference: Corani and Benavoli (2015) posterior, by hand, with scipy.stats.t.cdf.
    scale = math.sqrt((1 / j + rho / (1 - rho)) * d.var(ddof=1))
    below = stats.t.cdf(-rope, j - 1, loc=d.mean(), scale=scale)
    above = 1 - stats.t.cdf(rope, j - 1, loc=d.mean(), scale=scale)
    assert result.p_b == pytest.approx(below, abs=1e-12)
    assert result.p_a == pytest.approx(above, abs=1e-12)
    assert result.p_rope == pytest.approx(1 - below - above, abs=1e-12)
    assert result.scale == pytest.approx(scale, rel=1e-12)


def test_bayesian_rope_zero_matches_baycomp_two_way_split():
    a, b = _paired_scores(8, 10)
    result = bayesian_correlated_ttest(a, b, rho=0.1, rope=0)
    # Reference: baycomp.two_on_single, which returns (p_left, p_right) when rope is 0.
    p_left, p_right = baycomp.two_on_single(a, b, rope=0, runs=1)
    assert (result.p_a, result.p_b) == pytest.approx((p_left, p_right), abs=1e-9)
    assert result.p_rope == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("shift", [0.25, -0.25, 0.0078125])
def test_bayesian_constant_difference_matches_baycomp_point_mass(shift):
    b = np.array([0.5, 0.625, 0.75, 0.875])
    a = b + shift  # exact in binary, so every difference is the same number
    result = bayesian_correlated_ttest(a, b, rho=0.25, rope=0.01)
    # Reference: baycomp.CorrelatedTTest.probs, which puts all mass at the mean when the variance is 0.
    assert (result.p_a, result.p_rope, result.p_b) == baycomp.CorrelatedTTest.probs(a, b, rope=0.01)
    assert (result.loc, result.scale) == (shift, 0.0)


def test_bayesian_identical_candidates_put_all_mass_in_the_rope_even_at_rope_zero():
    a = np.array([0.81, 0.79, 0.84])
    for rope in (0.0, 0.01):
        result = bayesian_correlated_ttest(a, a.copy(), rho=0.2, rope=rope)
        assert (result.p_a, result.p_rope, result.p_b, result.scale) == (0.0, 1.0, 0.0, 0.0)


@pytest.mark.parametrize(
    ("seed", "n", "rounding"),
    [(0, 10, None), (1, 30, None), (2, 60, None), (3, 12, 2), (4, 25, 2), (5, 2, None)],
)
def test_wilcoxon_matches_scipy(seed, n, rounding):
    a, b = _paired_scores(seed, n)
    if rounding is not None:  # rounding makes ties and zero differences, which change scipy's method
        a, b = np.round(a, rounding), np.round(b, rounding)
        a[0] = b[0]
    result = wilcoxon_signed_rank(a, b)
    reference = stats.wilcoxon(a, b)  # Reference: scipy.stats.wilcoxon with its defaults.
    assert (result.stat, result.p) == (float(reference.statistic), float(reference.pvalue))


def test_wilcoxon_all_zero_differences_give_stat_zero_p_one():
    a = np.array([0.7, 0.8, 0.9, 0.6])
    result = wilcoxon_signed_rank(a, a.copy())
    assert (result.stat, result.p) == (0.0, 1.0)


def test_wilcoxon_drops_nan_pairs():
    a, b = _paired_scores(9, 12)
    a[[1, 5]] = np.nan
    keep = ~np.isnan(a)
    reference = stats.wilcoxon(a[keep], b[keep])  # Reference: scipy.stats.wilcoxon on the complete pairs.
    assert wilcoxon_signed_rank(a, b).p == float(reference.pvalue)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: corrected_resampled_ttest([0.8], [0.7], n_train=90, n_test=10),
         "needs at least 2 paired outer folds, got 1"),
        (lambda: corrected_resampled_ttest([0.8, np.nan], [0.7, 0.6], n_train=90, n_test=10),
         r"needs at least 2 paired outer folds, got 1 \(1 dropped because a score was NaN\)"),
        (lambda: corrected_resampled_ttest([0.8, 0.9], [0.7, 0.6, 0.5], n_train=90, n_test=10),
         "same length; got 2 and 3"),
        (lambda: corrected_resampled_ttest([0.8, 0.9], [0.7, np.inf], n_train=90, n_test=10),
         "non-finite values"),
        (lambda: corrected_resampled_ttest([0.8, 0.9], [0.7, 0.6], n_train=0, n_test=10),
         "finite, positive fold sizes"),
        (lambda: corrected_resampled_ttest([0.8, 0.9], [0.7, 0.6], n_train=[90, 90, 90], n_test=10),
         "one size per paired outer fold"),
        (lambda: bayesian_correlated_ttest([0.8, 0.9], [0.7, 0.6], rho=0.1, rope=-0.01),
         "rope must be a finite number >= 0"),
        (lambda: bayesian_correlated_ttest([0.8, 0.9], [0.7, 0.6], rho=1.0, rope=0.01),
         "0 <= rho < 1"),
        (lambda: wilcoxon_signed_rank([0.8], [0.7]), "needs at least 2 paired outer folds, got 1"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(call, message):
    with pytest.raises(ValueError, match=message):
        call()
