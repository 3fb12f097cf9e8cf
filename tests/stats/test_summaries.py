"""score_summary and optimism_summary against numpy and scipy.stats.t.interval."""

import math

import numpy as np
import pytest
from scipy import stats

from foldwise.stats.summaries import optimism_summary, score_summary


def test_score_summary_matches_numpy_and_scipy_t_interval():
    rng = np.random.default_rng(11)
    scores = rng.normal(0.8, 0.05, size=12)
    for confidence in (0.9, 0.95, 0.99):
        summary = score_summary(scores, confidence=confidence)
        # Reference: scipy.stats.t.interval with the standard error of the mean (scipy.stats.sem).
        low, high = stats.t.interval(confidence, scores.size - 1, loc=scores.mean(), scale=stats.sem(scores))
        assert summary.ci_low == pytest.approx(low, abs=1e-12)
        assert summary.ci_high == pytest.approx(high, abs=1e-12)
    # Reference: numpy's mean, std (ddof=1), min and max.
    assert summary.n == 12 and summary.n_missing == 0
    assert summary.mean == pytest.approx(np.mean(scores), abs=1e-15)
    assert summary.sd == pytest.approx(np.std(scores, ddof=1), abs=1e-15)
    assert (summary.min, summary.max) == (scores.min(), scores.max())


def test_nan_scores_are_excluded_and_counted():
    scores = np.array([0.7, np.nan, 0.9, 0.8, np.nan])
    summary = score_summary(scores)
    kept = scores[~np.isnan(scores)]
    assert (summary.n, summary.n_missing) == (3, 2)
    # Reference: numpy on the finite scores and scipy.stats.t.interval.
    assert summary.mean == pytest.approx(kept.mean())
    low, high = stats.t.interval(0.95, 2, loc=kept.mean(), scale=stats.sem(kept))
    assert (summary.ci_low, summary.ci_high) == pytest.approx((low, high))


def test_single_score_gives_nan_spread_not_an_error():
    summary = score_summary([0.75, np.nan])
    assert (summary.n, summary.n_missing, summary.mean) == (1, 1, 0.75)
    assert math.isnan(summary.sd) and math.isnan(summary.ci_low) and math.isnan(summary.ci_high)


def test_constant_scores_give_a_zero_width_interval():
    summary = score_summary([0.5, 0.5, 0.5])
    assert (summary.sd, summary.ci_low, summary.ci_high) == (0.0, 0.5, 0.5)


def test_optimism_summary_is_the_summary_of_inner_minus_outer():
    rng = np.random.default_rng(5)
    inner = rng.uniform(0.8, 0.9, size=10)
    outer = inner - rng.uniform(0.0, 0.05, size=10)
    inner[3] = np.nan
    outer[7] = np.nan
    summary = optimism_summary(inner, outer, confidence=0.9)
    kept = ~np.isnan(inner) & ~np.isnan(outer)
    diff = inner[kept] - outer[kept]
    assert (summary.n, summary.n_missing) == (8, 2)
    # Reference: numpy and scipy.stats.t.interval on the differences computed here.
    assert summary.mean == pytest.approx(diff.mean())
    assert summary.sd == pytest.approx(diff.std(ddof=1))
    low, high = stats.t.interval(0.9, diff.size - 1, loc=diff.mean(), scale=stats.sem(diff))
    assert (summary.ci_low, summary.ci_high) == pytest.approx((low, high))


@pytest.mark.parametrize(
    ("scores", "kwargs", "message"),
    [
        ([np.nan, np.nan], {}, "no score left once NaN are dropped"),
        ([0.5, np.inf], {}, "non-finite values"),
        ([[0.5, 0.6]], {}, "one-dimensional"),
        (["high", "low"], {}, "sequence of numbers"),
        ([0.5, 0.6], {"confidence": 95}, "strictly between 0 and 1"),
        ([0.5, 0.6], {"confidence": 0.0}, "strictly between 0 and 1"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(scores, kwargs, message):
    with pytest.raises(ValueError, match=message):
        score_summary(scores, **kwargs)


def test_optimism_summary_refuses_vectors_of_different_length():
    with pytest.raises(ValueError, match="same length; got 3 and 2"):
        optimism_summary([0.9, 0.8, 0.7], [0.8, 0.7])
