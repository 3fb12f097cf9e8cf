"""compare_paired: its numbers against scipy.stats and baycomp, its edge cases and its verdict."""

import dataclasses
import math
import re

import baycomp
import numpy as np
import pytest
from scipy import stats

from foldwise.stats.paired import PairedResult, compare_paired

KEYS = {"n", "n_missing", "mean_diff", "sd_diff", "diff_low", "diff_high", "diff_level",
        "corrected_t", "corrected_p", "df", "bayes_a", "bayes_rope",
        "bayes_b", "posterior_loc", "posterior_scale", "wilcoxon_stat", "wilcoxon_p", "identical", "verdict"}


def _scores(seed, n, shift, spread):
    rng = np.random.default_rng(seed)
    b = rng.uniform(0.7, 0.9, size=n)
    return b + shift + rng.normal(0.0, spread, size=n), b


def test_numbers_match_the_references_with_failed_fits_dropped():
    a, b = _scores(0, 30, 0.01, 0.02)  # 3 repeats of 10-fold CV on 200 samples
    a[4], b[17] = np.nan, np.nan
    out = compare_paired(a, b, n_train=180, n_test=20, rope=0.01)
    assert isinstance(out, PairedResult)
    assert {field.name for field in dataclasses.fields(out)} == KEYS
    with pytest.raises(dataclasses.FrozenInstanceError):
        out.verdict = "changed"
    keep = ~np.isnan(a) & ~np.isnan(b)
    x, y = a[keep], b[keep]
    d = x - y
    j = d.size
    assert (out.n, out.n_missing, out.df, out.identical) == (28, 2, 27, False)
    # Reference: Nadeau and Bengio (2003) corrected t by hand, p from scipy.stats.t.sf.
    t = d.mean() / math.sqrt((1 / j + 20 / 180) * d.var(ddof=1))
    assert out.corrected_t == pytest.approx(t, rel=1e-12)
    assert out.corrected_p == pytest.approx(2 * stats.t.sf(abs(t), j - 1), rel=1e-10)
    # Reference: Corani and Benavoli (2015) posterior by hand with scipy.stats.t, rho = 20 / 200. (28 complete
    # pairs are not a whole number of repeats, which baycomp needs; the baycomp check is the next test.)
    scale = math.sqrt((1 / j + 0.1 / 0.9) * d.var(ddof=1))
    assert out.posterior_scale == pytest.approx(scale, rel=1e-12)
    assert out.bayes_a == pytest.approx(stats.t.sf(0.01, j - 1, loc=d.mean(), scale=scale), abs=1e-12)
    assert out.bayes_b == pytest.approx(stats.t.cdf(-0.01, j - 1, loc=d.mean(), scale=scale), abs=1e-12)
    # Reference: scipy.stats.wilcoxon on the complete pairs.
    reference = stats.wilcoxon(x, y)
    assert (out.wilcoxon_stat, out.wilcoxon_p) == (reference.statistic, reference.pvalue)


def test_bayes_probabilities_match_baycomp_on_repeated_cv():
    a, b = _scores(1, 50, 0.004, 0.02)  # 10 repeats of 5-fold CV on 100 samples
    out = compare_paired(a, b, n_train=80, n_test=20, rope=0.01)
    # Reference: baycomp.CorrelatedTTest.probs with runs=10 (nfolds = 5, rho = 1/5 = 20/100).
    expected = baycomp.CorrelatedTTest.probs(a, b, rope=0.01, runs=10)
    assert (out.bayes_a, out.bayes_rope, out.bayes_b) == pytest.approx(expected, abs=1e-9)


def test_identical_candidates_do_not_crash_and_say_no_difference():
    a = np.array([0.81, 0.79, 0.84, 0.80, 0.83])
    out = compare_paired(a, a.copy(), n_train=80, n_test=20)
    assert out.identical is True
    assert (out.mean_diff, out.sd_diff, out.corrected_t, out.corrected_p) == (0.0, 0.0, 0.0, 1.0)
    assert (out.bayes_a, out.bayes_rope, out.bayes_b, out.posterior_scale) == (0.0, 1.0, 0.0, 0.0)
    assert (out.wilcoxon_stat, out.wilcoxon_p) == (0.0, 1.0)
    assert out.verdict == "no difference: the two candidates scored identically on every outer fold"


@pytest.mark.parametrize(("shift", "side"), [(0.25, "a"), (-0.25, "b"), (0.0078125, "rope")])
def test_constant_difference_gives_infinite_t_and_a_careful_verdict(shift, side):
    b = np.array([0.5, 0.625, 0.75, 0.875, 0.5])
    a = b + shift  # exact in binary: every difference is the same number, so the variance is zero
    out = compare_paired(a, b, n_train=80, n_test=20, rope=0.01)
    assert out.corrected_t == math.copysign(math.inf, shift) and out.corrected_p == 0.0
    probabilities = {"a": out.bayes_a, "rope": out.bayes_rope, "b": out.bayes_b}
    assert probabilities == {key: float(key == side) for key in probabilities}
    assert "posterior is degenerate, so no probability is given" in out.verdict
    assert "with probability" not in out.verdict
    # Reference: scipy.stats.wilcoxon; every difference has the same sign and rank.
    reference = stats.wilcoxon(a, b)
    assert (out.wilcoxon_stat, out.wilcoxon_p) == (reference.statistic, reference.pvalue)


def _claimed_probability(verdict):
    match = re.search(r"with probability (> )?(\d\.\d\d\d|1)\b", verdict)
    assert match, verdict
    return float(match.group(2))


def test_verdict_claims_a_better_only_with_probability_it_does_not_overstate():
    a, b = _scores(2, 20, 0.06, 0.01)
    out = compare_paired(a, b, n_train=90, n_test=10, rope=0.01, names=("forest", "tree"))
    assert out.bayes_a >= 0.95
    assert out.verdict.startswith("forest better than tree by more than the ROPE with probability")
    assert out.verdict.endswith("at ROPE 0.01")
    assert _claimed_probability(out.verdict) <= out.bayes_a


def test_verdict_claims_b_better_when_b_wins():
    a, b = _scores(3, 20, -0.06, 0.01)
    out = compare_paired(a, b, n_train=90, n_test=10, rope=0.01)
    assert out.bayes_b >= 0.95
    assert out.verdict.startswith("b better than a by more than the ROPE with probability")


def test_verdict_says_practically_equivalent_when_the_rope_holds_the_mass():
    a, b = _scores(4, 30, 0.0, 0.002)
    out = compare_paired(a, b, n_train=90, n_test=10, rope=0.01)
    assert out.bayes_rope >= 0.95
    assert out.verdict.startswith("practically equivalent with probability")
    assert _claimed_probability(out.verdict) <= out.bayes_rope


def test_verdict_says_the_data_do_not_decide_and_gives_three_probabilities():
    a, b = _scores(5, 10, 0.01, 0.03)
    out = compare_paired(a, b, n_train=90, n_test=10, rope=0.01)
    assert max(out.bayes_a, out.bayes_rope, out.bayes_b) < 0.95
    assert out.verdict.startswith("the data do not decide at ROPE 0.01: P(a better) = ")
    shown = [float(x) for x in re.findall(r"= (\d\.\d\d\d)\b", out.verdict)]
    assert len(shown) == 3
    for number, p in zip(shown, (out.bayes_a, out.bayes_rope, out.bayes_b), strict=True):
        assert p - 0.001 < number <= p  # rounded down to three decimals, as the cards show them


def test_single_paired_fold_is_refused():
    with pytest.raises(ValueError, match="needs at least 2 paired outer folds, got 1"):
        compare_paired([0.8, np.nan, 0.7], [0.7, 0.8, np.nan], n_train=80, n_test=20)


def test_negative_rope_is_refused():
    with pytest.raises(ValueError, match=r"rope must be a finite number >= 0 .*got -0.1"):
        compare_paired([0.8, 0.7], [0.7, 0.8], n_train=80, n_test=20, rope=-0.1)


def test_fold_size_arrays_are_averaged_for_unequal_folds():
    a, b = _scores(6, 5, 0.01, 0.02)
    n_test = np.array([21, 21, 20, 20, 20])
    n_train = 102 - n_test
    out = compare_paired(a, b, n_train=n_train, n_test=n_test)
    d = a - b
    ratio = n_test.mean() / n_train.mean()
    rho = n_test.mean() / (n_test.mean() + n_train.mean())
    # Independent computation of both corrections from the mean fold sizes.
    assert out.corrected_t == pytest.approx(d.mean() / math.sqrt((0.2 + ratio) * d.var(ddof=1)), rel=1e-12)
    assert out.posterior_scale == pytest.approx(math.sqrt((0.2 + rho / (1 - rho)) * d.var(ddof=1)),
                                                   rel=1e-12)


@pytest.mark.parametrize(("seed", "n", "level", "missing"), [(7, 10, 0.95, []), (8, 15, 0.9, [3, 11])])
def test_interval_of_the_mean_difference_is_the_corrected_t_with_j_minus_1_df(seed, n, level, missing):
    a, b = _scores(seed, n, 0.02, 0.02)
    a[missing] = np.nan
    n_train, n_test = np.full(n, 180.0), np.full(n, 20.0)
    out = compare_paired(a, b, n_train=n_train, n_test=n_test, level=level)
    d = (a - b)[~np.isnan(a)]
    j = d.size
    # Independent computation: Nadeau and Bengio's (2003) corrected variance, scipy.stats.t with J - 1 df.
    half = stats.t.ppf((1 + level) / 2, j - 1) * math.sqrt((1 / j + 20 / 180) * d.var(ddof=1))
    assert out.diff_low == pytest.approx(d.mean() - half, rel=1e-12)
    assert out.diff_high == pytest.approx(d.mean() + half, rel=1e-12)
    assert out.diff_level == level and out.n == j
    # The interval is the test's acceptance region: it excludes 0 exactly when p < 1 - level.
    assert (out.diff_low > 0 or out.diff_high < 0) == (out.corrected_p < 1 - level)


def test_interval_of_a_constant_difference_is_a_point():
    b = np.array([0.5, 0.625, 0.75, 0.875, 0.5])
    out = compare_paired(b + 0.25, b, n_train=80, n_test=20)
    assert out.diff_low == out.diff_high == 0.25
