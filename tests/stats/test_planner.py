"""project_wall_time against fits counted by walking the loops of a nested cross-validation."""

import itertools

import pytest

from foldwise.stats.planner import project_wall_time


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
