"""project_wall_time against fits counted by walking the loops of a nested cross-validation; repeat_narrowing
against the corrected t interval computed with scipy.stats."""

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from foldwise.stats.planner import project_wall_time, repeat_narrowing


def _count_fits(n_repeats, n_outer, n_inner, n_configs, n_refits):
    # Independent computation: one fit per (repeat, outer fold, inner fold, configuration) and per refit.
    loops = itertools.product(range(n_repeats), range(n_outer), range(n_inner), range(n_configs))
    inner = sum(1 for _ in loops)
    refits = sum(1 for _ in itertools.product(range(n_repeats), range(n_outer), range(n_refits)))
    return inner, refits


@pytest.mark.parametrize(
    ("n_repeats", "n_outer", "n_inner", "n_configs", "n_refits", "n_cores"),
    [(1, 5, 3, 4, None, 2), (3, 10, 5, 12, 1, 8), (2, 4, 4, 6, 6, 1)],
)
def test_fit_counts_and_times(n_repeats, n_outer, n_inner, n_configs, n_refits, n_cores):
    projection = project_wall_time(1.5, n_outer=n_outer, n_inner=n_inner, n_repeats=n_repeats,
                                   n_configs=n_configs, n_cores=n_cores, n_refits_per_fold=n_refits)
    per_fold = n_configs if n_refits is None else n_refits
    inner, refits = _count_fits(n_repeats, n_outer, n_inner, n_configs, per_fold)
    assert (projection.n_inner_fits, projection.n_outer_refits) == (inner, refits)
    assert projection.n_fits == inner + refits
    assert projection.cpu_seconds == pytest.approx(1.5 * (inner + refits))
    assert projection.wall_seconds == pytest.approx(1.5 * (inner + refits) / n_cores)
    assert "ideal pool" in projection.note


def test_more_cores_than_fits_cannot_beat_one_fit():
    projection = project_wall_time(2.0, n_outer=2, n_inner=1, n_repeats=1, n_configs=1, n_cores=16)
    assert projection.n_fits == 4
    assert projection.wall_seconds == pytest.approx(2.0)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"mean_fit_seconds": -1.0}, "mean_fit_seconds must be a finite number of seconds >= 0; got -1.0"),
        ({"mean_fit_seconds": float("nan")}, "mean_fit_seconds must be"),
        ({"n_outer": 0}, "n_outer must be a whole number >= 1; got 0"),
        ({"n_cores": 2.5}, "n_cores must be a whole number >= 1; got 2.5"),
        ({"n_inner": True}, "n_inner must be a whole number >= 1; got True"),
        ({"n_refits_per_fold": 0}, "n_refits_per_fold must be a whole number >= 1; got 0"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(kwargs, message):
    arguments = {"mean_fit_seconds": 1.0, "n_outer": 5, "n_inner": 3, "n_repeats": 1, "n_configs": 4,
                 "n_cores": 2} | kwargs
    seconds = arguments.pop("mean_fit_seconds")
    with pytest.raises(ValueError, match=message):
        project_wall_time(seconds, **arguments)


@pytest.mark.parametrize(("n_outer", "n_repeats", "n_train", "n_test"),
                         [(5, 1, 160, 40), (3, 1, 66, 34), (4, 2, 300, 100)])
def test_repeat_narrowing_against_the_corrected_interval_computed_from_scipy(n_outer, n_repeats, n_train, n_test):
    plan = repeat_narrowing(n_outer=n_outer, n_repeats=n_repeats, n_train=n_train, n_test=n_test, level=0.9)
    rng = np.random.default_rng(0)
    spread = rng.normal(0.8, 0.03, size=200)  # any sd: the ratio does not depend on it

    def width(j):
        # Independent computation: the corrected t half-width with scipy.stats.t quantiles (Nadeau and Bengio, 2003).
        sd = spread[:50].std(ddof=1)
        return stats.t.ppf(0.95, j - 1) * math.sqrt((1 / j + n_test / n_train) * sd**2)

    now = n_outer * n_repeats
    assert [gain.n_repeats for gain in plan.gains] == [r for r in (2, 3, 5, 10) if r > n_repeats]
    for gain in plan.gains:
        assert gain.n_folds == gain.n_repeats * n_outer
        assert gain.width_ratio == pytest.approx(width(gain.n_folds) / width(now), rel=1e-12)
        assert gain.fits_ratio == gain.n_repeats / n_repeats
        assert plan.limit_ratio < gain.width_ratio < 1
    limit = stats.norm.ppf(0.95) * math.sqrt(n_test / n_train) * spread[:50].std(ddof=1) / width(now)
    assert plan.limit_ratio == pytest.approx(limit, rel=1e-12)
    assert plan.gains[-1].width_ratio == pytest.approx(width(10 * n_outer) / width(now), rel=1e-12)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"n_outer": 0}, "n_outer must be a whole number >= 1; got 0"),
    ({"n_train": 0}, "n_train must be a positive number of rows; got 0"),
    ({"level": 1.0}, "level must be strictly between 0 and 1; got 1.0"),
    ({"n_outer": 1}, "needs at least 2 outer folds; the design has 1"),
])
def test_repeat_narrowing_refuses_bad_input(kwargs, message):
    with pytest.raises(ValueError, match=message):
        repeat_narrowing(**({"n_outer": 5, "n_repeats": 1, "n_train": 80, "n_test": 20} | kwargs))
