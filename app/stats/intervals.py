r"""Intervals for the nested estimate: how well the score of the whole select-and-refit procedure is known.

Three methods, each returning an :class:`Interval` in the metric's own orientation:

- :func:`corrected_t_interval`, centred on the nested estimate (the mean of the fold winners' outer
  scores), with the variance inflated for the overlap of the outer training sets (Nadeau and
  Bengio, 2003); valid with or without repeats of the outer loop, at no extra fit;
- :func:`bbc_interval`, the bootstrap of the pooled out-of-sample predictions of every configuration
  (Tsamardinos, Greasidou and Borboudakis, 2018), centred on its own, more pessimistic estimate;
- :func:`student_t_spread`, the plain Student-t interval over the outer folds, which treats them as
  independent: a description of the spread, not a confidence interval (it covers far less than its
  level once the outer loop is repeated).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ._arrays import mean_fold_size, score_vector
from ._resampled_metrics import SUPPORTED, ResampledMetric
from .summaries import score_summary


@dataclass(frozen=True)
class Interval:
    """An interval for the score of the select-and-refit procedure, with what it was computed from.

    ``estimate`` is the centre the method reports: the nested estimate for ``corrected_t`` and
    ``student_t_spread``, BBC-CV's own estimate for ``bbc``. ``n_used`` counts the outer folds used
    (rows for ``bbc``); ``n_failed`` the outer folds left out because their score was NaN
    (configurations left out because a prediction was missing, for ``bbc``). Bounds that cannot be
    computed are NaN, never dropped.
    """

    estimate: float
    low: float
    high: float
    level: float
    method: str
    n_used: int
    n_failed: int


def corrected_t_interval(scores, *, n_train, n_test, level: float = 0.95) -> Interval:
    r"""Corrected resampled t interval for the nested estimate, with or without repeats.

    Parameters
    ----------
    scores : array-like of float, shape (J_total,)
        The fold winners' outer scores, one per outer fold of every repeat. NaN marks a failed fold:
        it is left out and counted in ``n_failed``.
    n_train, n_test : float or array-like of shape (J_total,)
        Outer training and test set sizes: one number each (the mean fold size) or one per fold, of
        which the folds used are averaged.
    level : float, default 0.95
        Confidence level, strictly between 0 and 1.

    Returns
    -------
    Interval
        ``method="corrected_t"``, ``estimate`` the mean of the used scores (the nested estimate).
        With one used fold the bounds are NaN; with none the estimate is NaN too.

    Notes
    -----
    With :math:`J` used scores over all repeats, of mean :math:`\bar s` and variance :math:`\hat\sigma^2`
    (ddof=1),

    .. math:: \bar s \pm t_{(1+\text{level})/2,\,J-1}\,
              \sqrt{\left(\frac{1}{J} + \frac{n_\text{test}}{n_\text{train}}\right)\hat\sigma^2}.

    The plain interval uses :math:`1/J` alone, as if the folds were independent; their training sets
    overlap, so the scores are correlated (about :math:`n_\text{test}/n_\text{train}` of the variance
    does not average away) and, above all, repeating the outer loop adds folds that are nearly
    copies of each other. Nadeau and Bengio (2003) derived the inflation for random train/test
    splits; Bouckaert and Frank (2004) use it for ``r`` repeats of ``k``-fold CV with
    :math:`J = rk`. The same correction underlies :func:`foldwise.stats.paired.corrected_resampled_ttest`,
    whose acceptance region this interval is. A zero variance gives the point ``[s, s]``.

    References
    ----------
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.
    Bouckaert, R. R. and Frank, E. (2004). Evaluating the replicability of significance tests for
    comparing learning algorithms. PAKDD 2004, LNCS 3056, 3-12.

    Examples
    --------
    >>> iv = corrected_t_interval([0.80, 0.84, 0.78, 0.82, 0.81, float("nan")], n_train=80, n_test=20)
    >>> iv.method, iv.n_used, iv.n_failed, round(iv.estimate, 3)
    ('corrected_t', 5, 1, 0.81)
    >>> round(iv.low, 4), round(iv.high, 4)
    (0.7684, 0.8516)
    """
    _check_level(level)
    values = score_vector(scores, name="scores")
    keep = ~np.isnan(values)
    ratio = mean_fold_size(n_test, "n_test", keep) / mean_fold_size(n_train, "n_train", keep)
    used = values[keep]
    j = used.size
    estimate = float(np.mean(used)) if j else math.nan
    if j < 2:
        low = high = math.nan
    else:
        sd = 0.0 if np.all(used == used[0]) else float(np.std(used, ddof=1))
        half = float(stats.t.ppf((1 + level) / 2, j - 1)) * math.sqrt((1 / j + ratio) * sd**2)
        low, high = estimate - half, estimate + half
    return Interval(estimate=estimate, low=low, high=high, level=float(level), method="corrected_t",
                    n_used=j, n_failed=int(values.size - j))


def student_t_spread(scores, *, level: float = 0.95) -> Interval:
    r"""The plain Student-t interval over outer-fold scores: a description of their spread.

    Parameters
    ----------
    scores : array-like of float, shape (J_total,)
        One score per outer fold of every repeat; NaN (a failed fold) is left out and counted.
    level : float, default 0.95
        Level of the interval, strictly between 0 and 1.

    Returns
    -------
    Interval
        ``method="student_t_spread"``: the interval of :func:`foldwise.stats.summaries.score_summary`,
        NaN bounds with fewer than two used folds.

    Notes
    -----
    :math:`\bar s \pm t_{(1+\text{level})/2,\,J-1}\, \hat\sigma/\sqrt{J}` treats the outer folds as
    independent samples. They are not: their training sets overlap, and repeats of the outer loop
    re-use the same rows, so this interval narrows as repeats are added while the uncertainty about
    the procedure's score does not. Show it as the spread of the fold scores, never as a confidence
    interval for the nested estimate; :func:`corrected_t_interval` is that.

    References
    ----------
    Student (1908). The probable error of a mean. Biometrika 6(1), 1-25.
    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52,
    239-281.

    Examples
    --------
    >>> iv = student_t_spread([0.80, 0.84, 0.78, 0.82, 0.81])
    >>> iv.method, round(iv.low, 4), round(iv.high, 4)
    ('student_t_spread', 0.7822, 0.8378)
    """
    _check_level(level)
    values = score_vector(scores, name="scores")
    n_used = int(np.count_nonzero(~np.isnan(values)))
    if n_used == 0:
        return Interval(estimate=math.nan, low=math.nan, high=math.nan, level=float(level),
                        method="student_t_spread", n_used=0, n_failed=int(values.size))
    summary = score_summary(values, confidence=level)
    return Interval(estimate=summary.mean, low=summary.ci_low, high=summary.ci_high, level=float(level),
                    method="student_t_spread", n_used=summary.n, n_failed=summary.n_missing)


def bbc_interval(predictions, y_true, *, metric: str, select_metric: str | None = None,
                 classes=None, level: float = 0.95, n_bootstrap: int = 1000, random_state=None) -> Interval:
    r"""Bootstrap bias-corrected cross-validation (BBC-CV) interval from pooled out-of-sample predictions.

    Parameters
    ----------
    predictions : array-like, shape (n_rows, n_configs) or (n_rows, n_configs, n_classes)
        Every configuration's outer-test prediction for every row, pooled over the outer folds of
        one repeat (each row predicted once, by the model fitted without it). What an entry is
        depends on the metric: a predicted value for regression metrics; a predicted label (2-D) or
        per-class scores whose arg-max is the label (3-D) for ``accuracy`` and
        ``balanced_accuracy``; probabilities of the classes (3-D), or of the second class of two
        (2-D), for ``neg_log_loss`` and ``neg_brier_score``; a score that ranks the second class of
        two (probability or decision value; 3-D with two columns: the second) for ``roc_auc``.
        A configuration with any NaN prediction (a failed fit) is left out and counted.
    y_true : array-like, shape (n_rows,)
        The true targets of the rows, in the same order.
    metric : str
        The scikit-learn scorer name of the reported metric, oriented so that greater is better as
        scorers are: ``accuracy``, ``balanced_accuracy``, ``roc_auc`` (two classes),
        ``neg_log_loss``, ``neg_brier_score``, ``neg_mean_squared_error``,
        ``neg_root_mean_squared_error``, ``neg_mean_absolute_error``, ``r2``. Others are refused.
    select_metric : str, optional
        The scorer that chooses the configuration on each bootstrap sample (the selection metric of
        the nested run); defaults to ``metric``.
    classes : array-like, optional
        The class labels in the order of the last axis of 3-D predictions (a classifier's
        ``classes_``); defaults to the sorted unique labels of ``y_true``.
    level : float, default 0.95
        Level of the percentile interval, strictly between 0 and 1.
    n_bootstrap : int, default 1000
        Number of bootstrap samples, at least 10.
    random_state : int, numpy Generator or None
        Seeds ``numpy.random.default_rng``; bootstrap ``b`` takes the rows in row ``b`` of
        ``rng.integers(0, n_rows, size=(n_bootstrap, n_rows))``.

    Returns
    -------
    Interval
        ``method="bbc"``, ``estimate`` the BBC-CV estimate (mean of the out-of-bag scores), the
        percentile bounds, ``n_used`` = rows, ``n_failed`` = configurations left out for a missing
        prediction.

    Notes
    -----
    For :math:`b = 1..B`: draw :math:`n` rows with replacement; on them choose the configuration
    :math:`c_b` with the best ``select_metric`` (ties to the first); score :math:`c_b` by ``metric``
    on the rows not drawn, :math:`L_b`. The estimate is :math:`\bar L = \frac1B\sum_b L_b` and the
    interval the :math:`(1-\text{level})/2` and :math:`(1+\text{level})/2` quantiles of the
    :math:`L_b`. Choosing on the bootstrap sample and scoring elsewhere removes the optimism of
    reporting the best configuration's pooled score, without fitting anything again. A bootstrap
    whose out-of-bag score is undefined (e.g. ROC AUC with one class left out) is left out of the
    mean and quantiles.

    Metrics are evaluated under bootstrap weights (the counts of each row), which equals the scorer
    on the repeated rows, as matrix products for metrics that are means over rows (or functions of
    such means: RMSE, R², balanced accuracy) and by one sort per configuration for ROC AUC.

    References
    ----------
    Tsamardinos, I., Greasidou, E. and Borboudakis, G. (2018). Bootstrapping the out-of-sample
    predictions for efficient and accurate cross-validation. Machine Learning 107, 1895-1922.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> y = rng.integers(0, 2, size=200)
    >>> labels = np.where(rng.random((200, 3)) < [[0.7, 0.75, 0.8]], y[:, None], 1 - y[:, None])
    >>> iv = bbc_interval(labels, y, metric="accuracy", random_state=1)
    >>> iv.method, iv.n_used, iv.n_failed, iv.low < iv.estimate < iv.high
    ('bbc', 200, 0, True)
    """
    _check_level(level)
    select_metric = metric if select_metric is None else select_metric
    for name, value in (("metric", metric), ("select_metric", select_metric)):
        if value not in SUPPORTED:
            raise ValueError(f"{name} {value!r} is not supported by BBC-CV here; use one of "
                             f"{', '.join(SUPPORTED)} (scikit-learn scorer names)")
    if not (isinstance(n_bootstrap, int | np.integer) and not isinstance(n_bootstrap, bool) and n_bootstrap >= 10):
        raise ValueError(f"n_bootstrap must be an integer >= 10 (1000 is usual); got {n_bootstrap!r}")
    pooled, y, n_dropped = _pooled(predictions, y_true, label_metrics={metric, select_metric})
    chooser = ResampledMetric(select_metric, pooled, y, classes)
    scorer = chooser if select_metric == metric else ResampledMetric(metric, pooled, y, classes)

    n_rows = y.size
    rng = np.random.default_rng(random_state)
    draws = rng.integers(0, n_rows, size=(n_bootstrap, n_rows))
    in_bag = np.stack([np.bincount(rows, minlength=n_rows) for rows in draws]).astype(float)
    on_sample = chooser.all_configs(in_bag)
    chosen = np.argmax(np.where(np.isnan(on_sample), -np.inf, on_sample), axis=1)
    out_of_bag = scorer.chosen((in_bag == 0).astype(float), chosen)
    finite = out_of_bag[np.isfinite(out_of_bag)]
    if finite.size == 0:
        raise ValueError(f"{metric} could not be computed on any out-of-bag sample of the {n_rows} rows "
                         f"(e.g. one class only); BBC-CV needs rows of every class")
    low, high = np.quantile(finite, [(1 - level) / 2, (1 + level) / 2])
    return Interval(estimate=float(np.mean(finite)), low=float(low), high=float(high), level=float(level),
                    method="bbc", n_used=int(n_rows), n_failed=n_dropped)


def _pooled(predictions, y_true, *, label_metrics: set[str]) -> tuple[np.ndarray, np.ndarray, int]:
    """Check the pooled predictions against y_true and drop configurations with a missing prediction."""
    y = np.asarray(y_true)
    if y.ndim != 1 or y.size < 2:
        raise ValueError(f"y_true must be one-dimensional with at least two rows; got shape {y.shape}")
    raw = np.asarray(predictions)
    labels_only = label_metrics <= {"accuracy", "balanced_accuracy"} and raw.ndim == 2
    if raw.ndim not in (2, 3) or raw.shape[0] != y.size:
        raise ValueError(f"predictions must have shape (n_rows, n_configs) or (n_rows, n_configs, n_classes) "
                         f"with n_rows = len(y_true) = {y.size}; got {raw.shape}")
    if raw.shape[1] == 0:
        raise ValueError("predictions hold no configuration (shape[1] == 0)")
    if labels_only and raw.dtype.kind not in "fc":
        return raw, y, 0  # predicted labels of any type, none missing
    try:
        values = raw.astype(float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"predictions must be numbers for {sorted(label_metrics)}; got dtype {raw.dtype}") from exc
    if np.any(np.isinf(values)):
        raise ValueError("predictions hold infinite values; use NaN for a configuration whose fit failed")
    missing = np.isnan(values).reshape(values.shape[0], values.shape[1], -1).any(axis=(0, 2))
    if missing.all():
        raise ValueError(f"every one of the {missing.size} configurations has a missing (NaN) prediction; "
                         f"BBC-CV needs at least one configuration predicted on every row")
    return values[:, ~missing], y, int(missing.sum())


def _check_level(level) -> None:
    if not (isinstance(level, int | float | np.floating) and not isinstance(level, bool) and 0 < level < 1):
        raise ValueError(f"level must be a number strictly between 0 and 1, e.g. 0.95; got {level!r}")
