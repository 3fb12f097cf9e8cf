r"""How long a nested cross-validation will take, from the number of fits and a mean fit time."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Projection:
    """Fit counts and projected CPU and wall-clock time of a nested cross-validation."""

    n_inner_fits: int
    n_outer_refits: int
    n_fits: int
    cpu_seconds: float
    wall_seconds: float
    note: str


def project_wall_time(mean_fit_seconds, *, n_outer, n_inner, n_repeats, n_configs, n_cores,
                      n_refits_per_fold=None) -> Projection:
    r"""Project the number of fits and the running time of a nested cross-validation.

    Parameters
    ----------
    mean_fit_seconds : float
        Mean time of one fit (fitting and scoring), in seconds; ``>= 0``.
    n_outer, n_inner : int
        Number of outer and inner folds.
    n_repeats : int
        Number of repeats of the outer cross-validation.
    n_configs : int
        Number of configurations the inner loop tries (over all families).
    n_cores : int
        Number of worker processes fitting in parallel.
    n_refits_per_fold : int, optional
        Refits on each outer training set; defaults to ``n_configs`` (every configuration is refitted
        and scored on the outer test set). Pass 1 when only the fold winner is refitted.

    Returns
    -------
    Projection
        ``n_inner_fits``, ``n_outer_refits``, ``n_fits`` (their sum), ``cpu_seconds``, ``wall_seconds``
        and ``note`` (the assumption behind the wall time).

    Notes
    -----
    That nested CV costs :math:`n \times k \times m` fits (outer folds, inner folds, configurations) is
    common practice; with :math:`r` repeats and :math:`f` refits per outer fold,

    .. math:: \text{fits} = r\,n\,k\,m + r\,n\,f, \qquad
              \text{cpu} = \text{fits} \cdot \bar t, \qquad
              \text{wall} = \text{cpu} / \min(\text{cores}, \text{fits}).

    The wall time assumes an ideal pool: every core busy until the end, no start-up or transfer
    overhead and fits of equal length. It is a lower bound; uneven fits and overhead make real runs
    longer.

    References
    ----------
    Varma, S. and Simon, R. (2006). Bias in error estimation when using cross-validation for model
    selection. BMC Bioinformatics 7, 91.
    Cawley, G. C. and Talbot, N. L. C. (2010). On over-fitting in model selection and subsequent
    selection bias in performance evaluation. Journal of Machine Learning Research 11, 2079-2107.

    Examples
    --------
    >>> p = project_wall_time(2.0, n_outer=5, n_inner=3, n_repeats=2, n_configs=10, n_cores=4)
    >>> p.n_inner_fits, p.n_outer_refits, p.n_fits, p.cpu_seconds, p.wall_seconds
    (300, 100, 400, 800.0, 200.0)
    """
    if not (isinstance(mean_fit_seconds, int | float | np.integer | np.floating)
            and not isinstance(mean_fit_seconds, bool)
            and math.isfinite(mean_fit_seconds) and mean_fit_seconds >= 0):
        raise ValueError(f"mean_fit_seconds must be a finite number of seconds >= 0; "
                         f"got {mean_fit_seconds!r}")
    refits = n_configs if n_refits_per_fold is None else n_refits_per_fold
    counts = {"n_outer": n_outer, "n_inner": n_inner, "n_repeats": n_repeats, "n_configs": n_configs,
              "n_cores": n_cores, "n_refits_per_fold": refits}
    for name, value in counts.items():
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 1:
            raise ValueError(f"{name} must be a whole number >= 1; got {value!r}")
    n_outer_sets = n_repeats * n_outer
    n_inner_fits = int(n_outer_sets * n_inner * n_configs)
    n_outer_refits = int(n_outer_sets * refits)
    n_fits = n_inner_fits + n_outer_refits
    cpu_seconds = float(n_fits * mean_fit_seconds)
    busy_cores = min(int(n_cores), n_fits)
    note = (f"ideal pool of {busy_cores} busy cores with equal fits and no overhead: "
            "a lower bound, real runs take longer")
    return Projection(n_inner_fits=n_inner_fits, n_outer_refits=n_outer_refits, n_fits=n_fits,
                      cpu_seconds=cpu_seconds, wall_seconds=cpu_seconds / busy_cores, note=note)


@dataclass(frozen=True)
class RepeatGain:
    """How much repeating the outer loop would narrow the corrected t interval, and at what cost."""

    n_repeats: int
    n_folds: int  # outer folds over all repeats
    width_ratio: float  # expected width with these repeats / the width now
    fits_ratio: float  # fits with these repeats / the fits now


@dataclass(frozen=True)
class RepeatPlan:
    """The gains of a few repeat counts, and the narrowest any number of repeats can reach."""

    gains: list[RepeatGain]
    limit_ratio: float  # width with infinitely many repeats / the width now


def repeat_narrowing(*, n_outer: int, n_repeats: int, n_train: float, n_test: float, level: float = 0.95,
                     options=(2, 3, 5, 10)) -> RepeatPlan:
    r"""How much narrower the corrected t interval would be if the outer loop were repeated more often.

    Parameters
    ----------
    n_outer : int
        Outer folds per repeat.
    n_repeats : int
        Repeats of the outer loop run so far.
    n_train, n_test : float
        Mean outer training and test set sizes (they do not change with the number of repeats).
    level : float, default 0.95
        The interval's level, strictly between 0 and 1.
    options : sequence of int
        Repeat counts to project; those not above ``n_repeats`` are skipped.

    Returns
    -------
    RepeatPlan
        Per option: ``n_repeats``, ``n_folds`` (= repeats × ``n_outer``), ``width_ratio`` (expected width
        over today's) and ``fits_ratio`` (repeats over today's repeats: the fits grow in proportion);
        and ``limit_ratio``, the ratio no number of repeats can go below.

    Notes
    -----
    The corrected resampled t interval (Nadeau and Bengio, 2003; Bouckaert and Frank, 2004) over
    :math:`J` outer-fold scores of sample variance :math:`s^2` has half-width

    .. math:: h(J) = t_{(1+\text{level})/2,\,J-1}\,\sqrt{\left(\frac1J + \rho\right) s^2},
              \qquad \rho = n_\text{test}/n_\text{train}.

    Assuming the fold scores keep the spread they have (:math:`s^2` unchanged: more repeats make the
    estimate of the spread better, not the spread itself), repeating the outer loop :math:`r` times
    turns :math:`J_0 = r_0 k` into :math:`J = r k` and the width by
    :math:`h(J)/h(J_0)`. The term :math:`\rho` does not shrink with repeats: the folds of one data set
    share their rows, so as :math:`r \to \infty` the ratio tends to
    :math:`z_{(1+\text{level})/2}\sqrt{\rho} \,/\, \big(t_{J_0-1}\sqrt{1/J_0+\rho}\big)`.

    References
    ----------
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.
    Bouckaert, R. R. and Frank, E. (2004). Evaluating the replicability of significance tests for
    comparing learning algorithms. PAKDD 2004, LNCS 3056, 3-12.

    Examples
    --------
    >>> plan = repeat_narrowing(n_outer=5, n_repeats=1, n_train=80, n_test=20)
    >>> [(gain.n_repeats, round(gain.width_ratio, 3)) for gain in plan.gains]
    [(2, 0.719), (3, 0.648), (5, 0.597), (10, 0.561)]
    >>> round(plan.limit_ratio, 3)
    0.526
    """
    from scipy import stats

    for name, value in {"n_outer": n_outer, "n_repeats": n_repeats}.items():
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 1:
            raise ValueError(f"{name} must be a whole number >= 1; got {value!r}")
    for name, value in {"n_train": n_train, "n_test": n_test}.items():
        if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating) \
                or not math.isfinite(value) or value <= 0:
            raise ValueError(f"{name} must be a positive number of rows; got {value!r}")
    if not (isinstance(level, float | int) and 0 < level < 1):
        raise ValueError(f"level must be strictly between 0 and 1; got {level!r}")
    rho, quantile = n_test / n_train, (1 + level) / 2
    now = n_repeats * n_outer
    if now < 2:
        raise ValueError(f"the corrected t interval needs at least 2 outer folds; the design has {now}")

    def half_width(j: int) -> float:
        return float(stats.t.ppf(quantile, j - 1)) * math.sqrt(1 / j + rho)

    gains = [RepeatGain(n_repeats=int(r), n_folds=int(r * n_outer), width_ratio=half_width(r * n_outer)
                        / half_width(now), fits_ratio=r / n_repeats) for r in options if r > n_repeats]
    limit = float(stats.norm.ppf(quantile)) * math.sqrt(rho) / half_width(now)
    return RepeatPlan(gains=gains, limit_ratio=limit)
