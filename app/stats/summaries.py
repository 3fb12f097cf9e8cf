"""Summaries of a set of outer-fold scores: mean, spread and a Student-t interval for the mean."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ._arrays import paired_scores, score_vector


@dataclass(frozen=True)
class ScoreSummary:
    """Mean, spread and interval of a score vector with NaN (failed fits) left out."""

    n: int
    n_missing: int
    mean: float
    sd: float
    min: float
    max: float
    ci_low: float
    ci_high: float


def score_summary(scores, *, confidence: float = 0.95) -> ScoreSummary:
    """Summarise outer-fold scores with a Student-t confidence interval for their mean.

    Parameters
    ----------
    scores : array-like of float, shape (n_folds,)
        One score per outer fold (over all repeats). NaN marks a failed fit: it is left out and
        counted in ``n_missing``. Infinite values are refused.
    confidence : float, default 0.95
        Coverage of the interval, strictly between 0 and 1.

    Returns
    -------
    ScoreSummary
        ``n`` (scores used), ``n_missing``, ``mean``, ``sd`` (ddof=1), ``min``, ``max``, ``ci_low``,
        ``ci_high``. With a single score, ``sd`` and the interval are NaN rather than an error.

    Notes
    -----
    With :math:`n` scores of mean :math:`\\bar{x}` and standard deviation :math:`s` (ddof=1),

    .. math:: \\bar{x} \\pm t_{(1+c)/2,\\,n-1}\\, s / \\sqrt{n}.

    The interval treats the outer-fold scores as independent, which they are not (their training
    sets overlap), so it is narrower than the true uncertainty; read it as a description of the
    spread, not as a guarantee of coverage (Nadeau and Bengio, 2003).

    References
    ----------
    Student (1908). The probable error of a mean. Biometrika 6(1), 1-25.
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.

    Examples
    --------
    >>> s = score_summary([0.8, 0.9, 1.0, float("nan")])
    >>> s.n, s.n_missing, round(s.mean, 6), round(s.sd, 6)
    (3, 1, 0.9, 0.1)
    >>> round(s.ci_high - s.mean, 4) == round(s.mean - s.ci_low, 4)
    True
    """
    _check_confidence(confidence)
    values = score_vector(scores, name="scores")
    kept = values[~np.isnan(values)]
    return _summarise(kept, n_missing=values.size - kept.size, confidence=confidence, name="scores")


def optimism_summary(inner_best, outer, *, confidence: float = 0.95) -> ScoreSummary:
    """Summarise the optimism of the fold winners: inner best score minus outer score, per outer fold.

    Parameters
    ----------
    inner_best : array-like of float, shape (n_folds,)
        For each outer fold, the inner-CV mean score of the configuration the inner loop chose.
    outer : array-like of float, shape (n_folds,)
        The same configuration's score on that outer fold's test set (same order).
    confidence : float, default 0.95
        Coverage of the interval, strictly between 0 and 1.

    Returns
    -------
    ScoreSummary
        As :func:`score_summary`, over the differences ``inner_best - outer``. Pairs where either
        score is NaN are left out and counted in ``n_missing``.

    Notes
    -----
    Optimism per outer fold is :math:`o_j = \\text{inner}_j - \\text{outer}_j` (scores oriented so that
    greater is better); a positive mean says the inner estimate of the chosen configuration was too
    hopeful, the selection bias nested cross-validation exists to expose (Cawley and Talbot, 2010).
    The interval is the Student-t interval of :func:`score_summary`.

    References
    ----------
    Cawley, G. C. and Talbot, N. L. C. (2010). On over-fitting in model selection and subsequent
    selection bias in performance evaluation. Journal of Machine Learning Research 11, 2079-2107.
    Student (1908). The probable error of a mean. Biometrika 6(1), 1-25.

    Examples
    --------
    >>> s = optimism_summary([0.90, 0.92, 0.88], [0.85, 0.86, 0.86])
    >>> s.n, round(s.mean, 6)
    (3, 0.043333)
    """
    _check_confidence(confidence)
    inner_kept, outer_kept, keep = paired_scores(inner_best, outer, names=("inner_best", "outer"))
    return _summarise(inner_kept - outer_kept, n_missing=int((~keep).sum()), confidence=confidence,
                      name="inner_best and outer")


def _summarise(values: np.ndarray, *, n_missing: int, confidence: float, name: str) -> ScoreSummary:
    n = values.size
    if n == 0:
        raise ValueError(f"{name} has no score left once NaN are dropped ({n_missing} NaN); "
                         "pass at least one finite score")
    mean = float(np.mean(values))
    if n == 1:
        sd = low = high = math.nan
    else:
        sd = float(np.std(values, ddof=1))
        half = float(stats.t.ppf((1 + confidence) / 2, n - 1)) * sd / math.sqrt(n)
        low, high = mean - half, mean + half
    return ScoreSummary(n=n, n_missing=n_missing, mean=mean, sd=sd, min=float(np.min(values)),
                        max=float(np.max(values)), ci_low=low, ci_high=high)


def _check_confidence(confidence: float) -> None:
    if not (isinstance(confidence, int | float) and 0 < confidence < 1):
        raise ValueError(f"confidence must be a number strictly between 0 and 1, e.g. 0.95; "
                         f"got {confidence!r}")
