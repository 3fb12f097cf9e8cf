r"""Paired comparison of two candidates scored on the same outer folds.

Scores are oriented so that greater is better; differences are ``d = a - b``, so a positive mean
difference favours ``a``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ._arrays import is_constant, mean_fold_size, paired_scores, require_pairs
from .intervals import corrected_t_interval

# A verdict names an outcome only when its posterior probability reaches this (common practice).
_DECISIVE = 0.95


@dataclass(frozen=True)
class TTestResult:
    """Corrected resampled t-test on paired outer-fold differences."""

    mean_diff: float
    sd_diff: float
    t: float
    p: float
    df: int
    n: int


@dataclass(frozen=True)
class BayesResult:
    """Posterior probabilities of the Bayesian correlated t-test and the posterior's Student parameters."""

    p_a: float
    p_rope: float
    p_b: float
    df: int
    loc: float
    scale: float
    n: int


@dataclass(frozen=True)
class WilcoxonResult:
    """Wilcoxon signed-rank statistic and two-sided p-value."""

    stat: float
    p: float


def corrected_resampled_ttest(a, b, *, n_train, n_test) -> TTestResult:
    r"""Corrected resampled t-test of Nadeau and Bengio for scores from (repeated) cross-validation.

    Parameters
    ----------
    a, b : array-like of float, shape (J,)
        Scores of the two candidates on the same outer folds, over all repeats, in the same order.
        Pairs where either score is NaN (a failed fit) are dropped.
    n_train, n_test : float or array-like of shape (J,)
        Training and test set sizes of the outer folds. A scalar is taken as the mean fold size; an
        array (one size per fold, for unequal folds) is averaged over the folds kept.

    Returns
    -------
    TTestResult
        ``mean_diff``, ``sd_diff`` (ddof=1), ``t``, ``p`` (two-sided), ``df`` and ``n`` (= J, folds used).

    Notes
    -----
    With :math:`J` paired differences :math:`d_j = a_j - b_j` of mean :math:`\bar d` and variance
    :math:`s^2` (ddof=1),

    .. math:: t = \frac{\bar d}{\sqrt{(1/J + n_\text{test}/n_\text{train})\, s^2}}, \qquad \text{df} = J - 1.

    The term :math:`n_\text{test}/n_\text{train}` corrects for the overlap of the training sets, which
    makes the plain paired t-test far too confident. For ``r`` repeats of ``k``-fold CV,
    :math:`J = rk` (Bouckaert and Frank, 2004).

    Zero variance is handled by convention: when every difference is zero, ``t = 0`` and ``p = 1``;
    when every difference equals the same non-zero value, ``t = ±inf`` (sign of the mean) and ``p = 0``.

    References
    ----------
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.
    Bouckaert, R. R. and Frank, E. (2004). Evaluating the replicability of significance tests for
    comparing learning algorithms. PAKDD 2004, LNCS 3056, 3-12.

    Examples
    --------
    >>> r = corrected_resampled_ttest([0.80, 0.82, 0.84], [0.79, 0.80, 0.81], n_train=90, n_test=10)
    >>> r.n, r.df, round(r.mean_diff, 6), r.t > 0
    (3, 2, 0.02, True)
    """
    d, n_dropped, keep = _differences(a, b, what="corrected_resampled_ttest")
    ratio = _fold_size(n_test, "n_test", keep) / _fold_size(n_train, "n_train", keep)
    j = d.size
    mean, sd = _mean_sd(d)
    if sd == 0:
        t, p = (0.0, 1.0) if mean == 0 else (math.copysign(math.inf, mean), 0.0)
    else:
        t = mean / math.sqrt((1 / j + ratio) * sd**2)
        p = float(2 * stats.t.sf(abs(t), j - 1))
    return TTestResult(mean_diff=mean, sd_diff=sd, t=t, p=p, df=j - 1, n=j)


def bayesian_correlated_ttest(a, b, *, rho, rope) -> BayesResult:
    r"""Bayesian correlated t-test of Corani and Benavoli on paired cross-validation scores.

    Parameters
    ----------
    a, b : array-like of float, shape (J,)
        Scores of the two candidates on the same outer folds, over all repeats. Pairs where either
        score is NaN are dropped.
    rho : float
        Correlation between fold differences, ``n_test / (n_train + n_test)`` (``1/k`` for k-fold);
        ``0 <= rho < 1``.
    rope : float
        Half-width of the region of practical equivalence, in score units; ``rope >= 0``.

    Returns
    -------
    BayesResult
        ``p_a`` = P(d > rope) (a better), ``p_rope`` = P(|d| <= rope), ``p_b`` = P(d < -rope), and the
        posterior Student distribution's ``df``, ``loc``, ``scale`` (for drawing its density), ``n``.

    Notes
    -----
    The posterior of the mean difference is Student with

    .. math:: \text{df} = J - 1,\quad \text{loc} = \bar d,\quad
              \text{scale}^2 = \left(\frac{1}{J} + \frac{\rho}{1-\rho}\right) s^2,

    with :math:`s^2` the variance of the differences (ddof=1). ``p_rope`` is ``1 - p_a - p_b``.

    With zero variance the posterior is a point mass at the mean difference (a convention): all
    probability goes to ``p_rope`` when ``|mean| <= rope`` (so identical candidates give
    ``p_rope = 1``, also at ``rope = 0``), else to the side of the mean. baycomp agrees for
    ``rope > 0``; at ``rope = 0`` it splits identical candidates 0.5/0.5 instead.

    References
    ----------
    Corani, G. and Benavoli, A. (2015). A Bayesian approach for comparing cross-validated algorithms
    on multiple data sets. Machine Learning 100, 285-304.
    Benavoli, A., Corani, G., Demšar, J. and Zaffalon, M. (2017). Time for a change: a tutorial for
    comparing multiple classifiers through Bayesian analysis. Journal of Machine Learning Research
    18(77), 1-36.

    Examples
    --------
    >>> r = bayesian_correlated_ttest([0.80, 0.82, 0.84, 0.86], [0.70, 0.73, 0.72, 0.75],
    ...                               rho=0.1, rope=0.01)
    >>> r.df, round(r.loc, 6), round(r.p_a + r.p_rope + r.p_b, 12)
    (3, 0.105, 1.0)
    """
    if not (_is_number(rho) and 0 <= rho < 1):
        raise ValueError(f"rho must be a number with 0 <= rho < 1 (n_test / (n_train + n_test)); got {rho!r}")
    _check_rope(rope)
    d, _, _ = _differences(a, b, what="bayesian_correlated_ttest")
    j = d.size
    loc, sd = _mean_sd(d)
    scale = math.sqrt((1 / j + rho / (1 - rho)) * sd**2)
    if scale == 0:
        p_a, p_b = float(loc > rope), float(loc < -rope)
    else:
        p_a = float(stats.t.sf(rope, j - 1, loc=loc, scale=scale))
        p_b = float(stats.t.cdf(-rope, j - 1, loc=loc, scale=scale))
    p_rope = min(1.0, max(0.0, 1.0 - p_a - p_b))
    return BayesResult(p_a=p_a, p_rope=p_rope, p_b=p_b, df=j - 1, loc=loc, scale=scale, n=j)


def wilcoxon_signed_rank(a, b) -> WilcoxonResult:
    r"""Wilcoxon signed-rank test on paired outer-fold scores, through ``scipy.stats.wilcoxon``.

    Parameters
    ----------
    a, b : array-like of float, shape (J,)
        Paired scores; pairs where either score is NaN are dropped.

    Returns
    -------
    WilcoxonResult
        ``stat`` (the smaller of the signed-rank sums :math:`R^+`, :math:`R^-`) and ``p`` (two-sided).

    Notes
    -----
    The differences :math:`d_j = a_j - b_j` are ranked by :math:`|d_j|` (ties get average ranks) and
    :math:`R^+ = \sum_{d_j > 0} \text{rank}_j`, :math:`R^- = \sum_{d_j < 0} \text{rank}_j`. Zero
    differences are dropped before ranking (scipy's ``zero_method="wilcox"``, the default). scipy is
    called with its defaults: an exact null distribution for small samples without ties or zeros, an
    exact permutation for up to 13 differences with ties or zeros, the normal approximation beyond.
    When every difference is zero, ``stat = 0`` and ``p = 1`` without calling scipy (a convention).

    The test treats the outer folds as independent samples and ignores the overlap of their training
    sets, so its p-value is optimistic here; Demšar (2006) recommends it across data sets, where the
    samples are independent.

    References
    ----------
    Wilcoxon, F. (1945). Individual comparisons by ranking methods. Biometrics Bulletin 1(6), 80-83.
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets. Journal of
    Machine Learning Research 7, 1-30.

    Examples
    --------
    >>> r = wilcoxon_signed_rank([0.81, 0.83, 0.85, 0.87, 0.89], [0.80, 0.80, 0.80, 0.80, 0.80])
    >>> r.stat, round(r.p, 4)
    (0.0, 0.0625)
    """
    first, second, keep = paired_scores(a, b)
    require_pairs(first.size, int((~keep).sum()), minimum=2, what="wilcoxon_signed_rank")
    if np.all(first == second):
        return WilcoxonResult(stat=0.0, p=1.0)
    result = stats.wilcoxon(first, second)
    return WilcoxonResult(stat=float(result.statistic), p=float(result.pvalue))


@dataclass(frozen=True)
class PairedResult:
    """``compare_paired``'s answer: the three paired tests of the differences a − b, the corrected interval of
    their mean and a verdict. Fields in the order the JSON answers list them."""

    n: int  # pairs used
    n_missing: int  # pairs left out because a score was NaN (a failed fit)
    mean_diff: float
    sd_diff: float  # ddof=1
    diff_low: float  # the corrected interval of the mean difference at diff_level
    diff_high: float
    diff_level: float
    corrected_t: float  # ±inf when every difference is the same non-zero value
    corrected_p: float
    df: int  # J − 1, for the t-test, the interval and the posterior alike
    bayes_a: float  # P(a better by more than the ROPE)
    bayes_rope: float  # P(within the ROPE)
    bayes_b: float  # P(b better by more than the ROPE)
    posterior_loc: float  # the Student posterior of the mean difference: its centre and scale
    posterior_scale: float  # 0 when every difference is the same: a point mass
    wilcoxon_stat: float
    wilcoxon_p: float
    identical: bool  # every difference zero
    verdict: str  # a plain sentence drawn from the Bayesian probabilities


def compare_paired(a, b, *, n_train, n_test, rope: float = 0.01,
                   names: tuple[str, str] = ("a", "b"), level: float = 0.95) -> PairedResult:
    r"""Compare two candidates on the same outer folds with all three paired tests and a verdict.

    Parameters
    ----------
    a, b : array-like of float, shape (n_folds,)
        Scores of the two candidates on the same outer folds over all repeats (greater is better).
        Pairs where either score is NaN (a failed fit) are dropped and counted.
    n_train, n_test : float or array-like of shape (n_folds,)
        Outer training and test set sizes, as for :func:`corrected_resampled_ttest`.
    rope : float, default 0.01
        Half-width of the region of practical equivalence, in score units; ``rope >= 0``.
    names : tuple of str, default ("a", "b")
        How the verdict names the two candidates.
    level : float, default 0.95
        Level of the corrected interval of the mean difference.

    Returns
    -------
    PairedResult
        ``n``, ``n_missing``, ``mean_diff``, ``sd_diff``, ``diff_low`` and ``diff_high`` (the corrected
        interval of the mean difference at ``level``, given as ``diff_level``), ``corrected_t``,
        ``corrected_p``, ``df``, ``bayes_a``, ``bayes_rope``, ``bayes_b``, ``posterior_loc``, ``posterior_scale``,
        ``wilcoxon_stat``, ``wilcoxon_p``, ``identical`` (every difference zero) and ``verdict`` (a
        plain sentence drawn from the Bayesian probabilities).

    Notes
    -----
    The corrected t-test (Nadeau and Bengio, 2003) uses :math:`n_\text{test}/n_\text{train}`; the
    Bayesian correlated t-test (Corani and Benavoli, 2015) uses
    :math:`\rho = n_\text{test}/(n_\text{train} + n_\text{test})`, computed from the mean fold sizes.
    The interval of the mean difference is the acceptance region of the corrected t-test,

    .. math:: \bar d \pm t_{(1+\text{level})/2,\,J-1}\sqrt{(1/J + n_\text{test}/n_\text{train})\,s^2},

    with :math:`J - 1` degrees of freedom (:func:`foldwise.stats.intervals.corrected_t_interval` on the
    differences), so it excludes 0 exactly when the test's p is below ``1 - level``.
    The verdict claims an outcome only when its posterior probability reaches 0.95, otherwise it says
    the data do not decide and gives the three probabilities, written by :func:`probability_text` as
    the pages write them (three decimals, rounded down so the sentence never overstates).
    Zero-variance cases follow the conventions of the three tests.

    References
    ----------
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.
    Corani, G. and Benavoli, A. (2015). A Bayesian approach for comparing cross-validated algorithms
    on multiple data sets. Machine Learning 100, 285-304.
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets. Journal of
    Machine Learning Research 7, 1-30.

    Examples
    --------
    >>> out = compare_paired([0.8, 0.9, 0.7], [0.8, 0.9, 0.7], n_train=80, n_test=20)
    >>> out.identical, out.corrected_p, out.bayes_rope
    (True, 1.0, 1.0)
    >>> out.verdict
    'no difference: the two candidates scored identically on every outer fold'
    """
    _check_rope(rope)
    d, n_dropped, keep = _differences(a, b, what="compare_paired")
    mean_train, mean_test = _fold_size(n_train, "n_train", keep), _fold_size(n_test, "n_test", keep)
    ttest = corrected_resampled_ttest(a, b, n_train=n_train, n_test=n_test)
    bayes = bayesian_correlated_ttest(a, b, rho=mean_test / (mean_train + mean_test), rope=rope)
    wilcoxon = wilcoxon_signed_rank(a, b)
    identical = bool(np.all(d == 0))
    full = np.full(keep.size, np.nan)
    full[keep] = d
    interval = corrected_t_interval(full, n_train=n_train, n_test=n_test, level=level)
    return PairedResult(
        n=ttest.n, n_missing=n_dropped, mean_diff=ttest.mean_diff, sd_diff=ttest.sd_diff,
        diff_low=interval.low, diff_high=interval.high, diff_level=interval.level,
        corrected_t=ttest.t, corrected_p=ttest.p, df=ttest.df,
        bayes_a=bayes.p_a, bayes_rope=bayes.p_rope, bayes_b=bayes.p_b,
        posterior_loc=bayes.loc, posterior_scale=bayes.scale,
        wilcoxon_stat=wilcoxon.stat, wilcoxon_p=wilcoxon.p, identical=identical,
        verdict=_verdict(bayes, rope=rope, constant=ttest.sd_diff == 0, names=names))


def _differences(a, b, *, what: str) -> tuple[np.ndarray, int, np.ndarray]:
    first, second, keep = paired_scores(a, b)
    n_dropped = int((~keep).sum())
    require_pairs(first.size, n_dropped, minimum=2, what=what)
    return first - second, n_dropped, keep


def _mean_sd(d: np.ndarray) -> tuple[float, float]:
    # Exact check, so a constant difference gets sd 0 rather than a rounding residue.
    if is_constant(d):
        return float(d[0]), 0.0
    return float(np.mean(d)), float(np.std(d, ddof=1))


def _fold_size(size, name: str, keep: np.ndarray) -> float:
    return mean_fold_size(size, name, keep, unit="paired outer fold")


def _verdict(bayes: BayesResult, *, rope: float, constant: bool, names: tuple[str, str]) -> str:
    a, b = names
    at_rope = f"at ROPE {rope:g}"
    if constant and bayes.loc == 0:
        return "no difference: the two candidates scored identically on every outer fold"
    if constant:
        gap = f"{abs(bayes.loc):.3g}"
        if abs(bayes.loc) <= rope:
            finding = f"{a} and {b} differ by the same {gap} on every outer fold, within the ROPE ({rope:g})"
        else:
            winner, loser = (a, b) if bayes.loc > 0 else (b, a)
            finding = (f"{winner} scored {gap} above {loser} on every outer fold, "
                       f"more than the ROPE ({rope:g})")
        return f"{finding}; with zero spread the posterior is degenerate, so no probability is given"
    if bayes.p_rope >= _DECISIVE:
        return f"practically equivalent with probability {probability_text(bayes.p_rope)} {at_rope}"
    for p, winner, loser in ((bayes.p_a, a, b), (bayes.p_b, b, a)):
        if p >= _DECISIVE:
            return (f"{winner} better than {loser} by more than the ROPE with probability "
                    f"{probability_text(p)} {at_rope}")
    return (f"the data do not decide {at_rope}: P({a} better) {_relation(bayes.p_a)}, "
            f"P(practically equivalent) {_relation(bayes.p_rope)}, P({b} better) {_relation(bayes.p_b)}")


def _relation(p: float) -> str:
    shown = probability_text(p)
    return shown if shown[0] in "<>" else f"= {shown}"


def probability_text(p: float) -> str:
    """A probability as the verdict and the pages write it: three decimals, rounded down, and never shown as 0
    or 1 unless it is exactly that, so no sentence or card overstates ("> 0.999", "< 0.001").

    >>> probability_text(0.6179), probability_text(0.99996), probability_text(0.0), probability_text(0.95)
    ('0.617', '> 0.999', '0', '0.950')
    """
    if p in (0.0, 1.0):
        return f"{p:.0f}"
    if p > 0.999:
        return "> 0.999"
    if p < 0.001:
        return "< 0.001"
    return f"{math.floor(p * 1000 + 1e-9) / 1000:.3f}"


def _check_rope(rope) -> None:
    if not (_is_number(rope) and math.isfinite(rope) and rope >= 0):
        raise ValueError(f"rope must be a finite number >= 0 (in score units, e.g. 0.01); got {rope!r}")


def _is_number(value) -> bool:
    return isinstance(value, int | float | np.integer | np.floating) and not isinstance(value, bool)
