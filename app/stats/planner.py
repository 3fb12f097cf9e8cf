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
