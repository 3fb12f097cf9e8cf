"""The intervals beside the nested estimate, each against an independent computation.

References: scipy.stats (t quantiles and ``t.interval``), baycomp's correlated t-test (its
Nadeau-Bengio variance with ``runs`` repeats), a plain-loop BBC-CV written here with sklearn.metrics
as the scorers (Tsamardinos, Greasidou and Borboudakis, 2018, Algorithm 1 as described in the paper).
"""

import math
import warnings

import numpy as np
import pytest
from baycomp import CorrelatedTTest
from scipy import stats
from sklearn import metrics

from foldwise.stats.intervals import Interval, bbc_interval, corrected_t_interval, student_t_spread
from foldwise.stats.paired import corrected_resampled_ttest
from foldwise.stats.summaries import score_summary

SCORES = np.array([0.81, 0.78, 0.84, 0.80, 0.79])


# --- corrected t -----------------------------------------------------------------------------------

@pytest.mark.parametrize("level", [0.8, 0.9, 0.95, 0.99])
def test_corrected_t_matches_the_formula_with_scipy_quantiles(level):
    iv = corrected_t_interval(SCORES, n_train=160, n_test=40, level=level)
    # Nadeau & Bengio (2003): mean ± t_{(1+level)/2, J-1} · sqrt((1/J + n_test/n_train) · s²), scipy's t.ppf
    j, s2 = SCORES.size, np.var(SCORES, ddof=1)
    half = stats.t.ppf((1 + level) / 2, j - 1) * math.sqrt((1 / j + 40 / 160) * s2)
    assert iv == Interval(estimate=pytest.approx(SCORES.mean()), low=pytest.approx(SCORES.mean() - half),
                          high=pytest.approx(SCORES.mean() + half), level=level, method="corrected_t",
                          n_used=5, n_failed=0)


def test_corrected_t_on_a_repeated_design_matches_baycomp():
    # 3 repeats × 5 folds: baycomp's correlated t-test computes the Nadeau-Bengio variance from
    # runs=3 (rho = 1/5, so rho/(1-rho) = n_test/n_train = 1/4); its Student posterior's central
    # interval is the corrected t interval.
    scores = np.random.default_rng(4).normal(0.8, 0.03, size=15)
    iv = corrected_t_interval(scores, n_train=400, n_test=100, level=0.9)
    mean, var, df = CorrelatedTTest.compute_statistics(np.zeros(15), scores, runs=3)
    low, high = stats.t.interval(0.9, df, loc=mean, scale=math.sqrt(var))
    assert (iv.n_used, iv.low, iv.high) == (15, pytest.approx(low), pytest.approx(high))


def test_repeats_widen_the_plain_t_ratio_as_the_correction_says():
    # With J = 15 folds and n_test/n_train = 1/4 the corrected interval is sqrt(1 + 15/4) times the
    # plain one over the same folds (same df, same sd): the plain t narrows as repeats are added.
    scores = np.random.default_rng(5).normal(0.7, 0.05, size=15)
    corrected = corrected_t_interval(scores, n_train=80, n_test=20)
    plain = student_t_spread(scores)
    ratio = (corrected.high - corrected.low) / (plain.high - plain.low)
    assert ratio == pytest.approx(math.sqrt(1 + 15 / 4))


def test_corrected_t_bounds_are_where_the_corrected_test_reaches_its_level():
    # The interval is the acceptance region of the corrected resampled t-test of the scores against a
    # constant: at either bound the two-sided p-value equals 1 - level.
    iv = corrected_t_interval(SCORES, n_train=90, n_test=10, level=0.9)
    for bound in (iv.low, iv.high):
        test = corrected_resampled_ttest(SCORES, np.full(5, bound), n_train=90, n_test=10)
        assert test.p == pytest.approx(0.1)


def test_failed_folds_are_left_out_and_counted_with_their_sizes():
    scores = np.array([0.8, np.nan, 0.82, 0.79, np.nan, 0.81])
    n_train, n_test = np.array([90, 10, 80, 90, 10, 85]), np.array([10, 90, 20, 10, 90, 15])
    iv = corrected_t_interval(scores, n_train=n_train, n_test=n_test)
    kept = ~np.isnan(scores)
    ratio = n_test[kept].mean() / n_train[kept].mean()  # the used folds' sizes only
    half = stats.t.ppf(0.975, 3) * math.sqrt((1 / 4 + ratio) * np.var(scores[kept], ddof=1))
    assert (iv.n_used, iv.n_failed) == (4, 2)
    mean = np.mean(scores[kept])
    assert (iv.low, iv.high) == (pytest.approx(mean - half), pytest.approx(mean + half))


def test_too_few_folds_give_nan_bounds_not_an_error():
    one = corrected_t_interval([0.8, np.nan], n_train=50, n_test=50)
    assert (one.estimate, one.n_used, one.n_failed) == (0.8, 1, 1) and math.isnan(one.low) and math.isnan(one.high)
    none = corrected_t_interval([np.nan, np.nan], n_train=50, n_test=50)
    assert none.n_used == 0 and all(math.isnan(v) for v in (none.estimate, none.low, none.high))
    spread = student_t_spread([np.nan, np.nan, np.nan])
    assert (spread.n_used, spread.n_failed) == (0, 3) and math.isnan(spread.estimate)


def test_constant_scores_give_a_point():
    iv = corrected_t_interval([0.75] * 5, n_train=40, n_test=10)
    assert (iv.low, iv.estimate, iv.high) == (0.75, 0.75, 0.75)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"scores": [[0.8, 0.9]], "n_train": 8, "n_test": 2}, "one-dimensional"),
    ({"scores": [0.8, np.inf], "n_train": 8, "n_test": 2}, "non-finite"),
    ({"scores": ["a", "b"], "n_train": 8, "n_test": 2}, "sequence of numbers"),
    ({"scores": [0.8, 0.9], "n_train": 0, "n_test": 2}, "n_train must hold finite, positive"),
    ({"scores": [0.8, 0.9], "n_train": 8, "n_test": [2, 2, 2]}, r"n_test must be one number .* \(2\)"),
    ({"scores": [0.8, 0.9], "n_train": 8, "n_test": 2, "level": 95}, "level must be a number strictly between"),
    ({"scores": [0.8, 0.9], "n_train": 8, "n_test": 2, "level": True}, "level must be"),
])
def test_corrected_t_refuses_bad_input_naming_it(kwargs, message):
    scores = kwargs.pop("scores")
    with pytest.raises(ValueError, match=message):
        corrected_t_interval(scores, **kwargs)


# --- plain t, labelled as a spread ---------------------------------------------------------------

def test_student_t_spread_is_scipys_t_interval_and_the_summary_interval():
    scores = np.array([0.8, 0.85, np.nan, 0.78, 0.83])
    iv = student_t_spread(scores, level=0.9)
    kept = scores[~np.isnan(scores)]
    low, high = stats.t.interval(0.9, kept.size - 1, loc=kept.mean(), scale=stats.sem(kept))  # scipy.stats
    summary = score_summary(scores, confidence=0.9)
    assert (iv.method, iv.n_used, iv.n_failed) == ("student_t_spread", 4, 1)
    assert (iv.low, iv.high) == (pytest.approx(low), pytest.approx(high))
    assert (iv.low, iv.high) == (summary.ci_low, summary.ci_high)  # one definition of the plain t


# --- BBC-CV against a plain loop ------------------------------------------------------------------

def _loop_bbc(pred, y, *, score, n_bootstrap, seed, level):
    """BBC-CV as the paper describes it, one bootstrap at a time, scoring with sklearn.metrics."""
    n, n_configs = y.size, pred.shape[1]
    draws = np.random.default_rng(seed).integers(0, n, size=(n_bootstrap, n))
    values = []
    for rows in draws:
        left_out = np.setdiff1d(np.arange(n), rows)
        on_sample = [score(y[rows], pred[rows, c]) for c in range(n_configs)]
        best = int(np.argmax(on_sample))  # first of equal scores
        values.append(score(y[left_out], pred[left_out, best]))
    values = np.array(values)
    return values.mean(), *np.quantile(values, [(1 - level) / 2, (1 + level) / 2])


def _binary_case(seed=0, n=40, n_configs=4):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, size=n)
    proba = np.clip(0.5 + (y[:, None] - 0.5) * rng.uniform(0.1, 0.9, (n, n_configs))
                    + rng.normal(0, 0.2, (n, n_configs)), 0.01, 0.99)
    return y, proba


def _multiclass_case(seed=1, n=45, n_configs=3):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 3, size=n)
    logits = rng.normal(size=(n, n_configs, 3)) + 1.5 * np.eye(3)[y][:, None, :]
    return y, np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)


def _regression_case(seed=2, n=40, n_configs=4):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    return y, y[:, None] + rng.normal(0, np.linspace(0.5, 1.2, n_configs), (n, n_configs))


def _cases():
    y2, p2 = _binary_case()
    y3, p3 = _multiclass_case()
    yr, pr = _regression_case()
    labels2 = (p2 > 0.5).astype(int)
    return {
        "accuracy, labels": ("accuracy", labels2, y2, metrics.accuracy_score),
        "accuracy, probabilities": ("accuracy", np.stack([1 - p2, p2], axis=2), y2,
                                    lambda t, p: metrics.accuracy_score(t, p.argmax(axis=1))),
        "balanced accuracy": ("balanced_accuracy", labels2, y2, metrics.balanced_accuracy_score),
        "roc auc": ("roc_auc", p2, y2, metrics.roc_auc_score),
        "log loss, binary": ("neg_log_loss", p2, y2, lambda t, p: -metrics.log_loss(t, p, labels=[0, 1])),
        "log loss, 3 classes": ("neg_log_loss", p3, y3, lambda t, p: -metrics.log_loss(t, p, labels=[0, 1, 2])),
        "brier, binary": ("neg_brier_score", p2, y2, lambda t, p: -metrics.brier_score_loss(t, p, labels=[0, 1])),
        "brier, 3 classes": ("neg_brier_score", p3, y3,
                             lambda t, p: -metrics.brier_score_loss(t, p, labels=[0, 1, 2])),
        "mse": ("neg_mean_squared_error", pr, yr, lambda t, p: -metrics.mean_squared_error(t, p)),
        "rmse": ("neg_root_mean_squared_error", pr, yr, lambda t, p: -metrics.root_mean_squared_error(t, p)),
        "mae": ("neg_mean_absolute_error", pr, yr, lambda t, p: -metrics.mean_absolute_error(t, p)),
        "r2": ("r2", pr, yr, metrics.r2_score),
    }


@pytest.mark.parametrize("case", list(_cases()))
def test_bbc_equals_a_plain_loop_with_sklearn_metrics(case):
    metric, pred, y, score = _cases()[case]
    iv = bbc_interval(pred, y, metric=metric, level=0.9, n_bootstrap=60, random_state=7)
    estimate, low, high = _loop_bbc(pred, y, score=score, n_bootstrap=60, seed=7, level=0.9)
    assert (iv.method, iv.n_used, iv.n_failed, iv.level) == ("bbc", y.size, 0, 0.9)
    assert (iv.estimate, iv.low, iv.high) == (pytest.approx(estimate, rel=1e-9), pytest.approx(low, rel=1e-9),
                                              pytest.approx(high, rel=1e-9))


def test_bbc_selects_by_one_metric_and_reports_another():
    y, proba = _binary_case(seed=3)
    iv = bbc_interval(proba, y, metric="neg_log_loss", select_metric="roc_auc", n_bootstrap=40, random_state=2,
                      level=0.8)
    n, draws = y.size, np.random.default_rng(2).integers(0, y.size, size=(40, y.size))
    values = []
    for rows in draws:
        left_out = np.setdiff1d(np.arange(n), rows)
        best = int(np.argmax([metrics.roc_auc_score(y[rows], proba[rows, c]) for c in range(proba.shape[1])]))
        values.append(-metrics.log_loss(y[left_out], proba[left_out, best], labels=[0, 1]))
    assert iv.estimate == pytest.approx(np.mean(values), rel=1e-9)
    assert (iv.low, iv.high) == tuple(pytest.approx(q, rel=1e-9) for q in np.quantile(values, [0.1, 0.9]))


def test_bbc_takes_string_labels_and_the_classes_order():
    y, proba = _binary_case(seed=4)
    names = np.array(["no", "yes"])[y]
    three_d = np.stack([1 - proba, proba], axis=2)
    by_index = bbc_interval(three_d, y, metric="accuracy", n_bootstrap=30, random_state=0)
    by_name = bbc_interval(three_d, names, metric="accuracy", n_bootstrap=30, random_state=0)
    reversed_columns = bbc_interval(three_d[:, :, ::-1], names, metric="accuracy", classes=["yes", "no"],
                                    n_bootstrap=30, random_state=0)
    assert by_index == by_name == reversed_columns


def test_bbc_leaves_out_a_configuration_with_a_missing_prediction_and_counts_it():
    y, pred = _regression_case()
    with_gap = pred.copy()
    with_gap[3, 1] = np.nan
    iv = bbc_interval(with_gap, y, metric="neg_mean_squared_error", n_bootstrap=50, random_state=1)
    without = bbc_interval(np.delete(pred, 1, axis=1), y, metric="neg_mean_squared_error", n_bootstrap=50,
                           random_state=1)
    assert iv.n_failed == 1
    assert (iv.estimate, iv.low, iv.high) == (without.estimate, without.low, without.high)


def test_bbc_is_seeded():
    y, pred = _regression_case()
    first = bbc_interval(pred, y, metric="r2", n_bootstrap=200, random_state=11)
    assert first == bbc_interval(pred, y, metric="r2", n_bootstrap=200, random_state=11)
    assert first != bbc_interval(pred, y, metric="r2", n_bootstrap=200, random_state=12)


def test_bbc_is_less_optimistic_than_the_best_pooled_score():
    # Ten configurations equally good (no real difference): the best pooled accuracy is inflated by
    # the choice; BBC-CV's estimate removes most of it (the paper's motivating case).
    rng = np.random.default_rng(8)
    y = rng.integers(0, 2, size=300)
    pred = np.where(rng.random((300, 10)) < 0.7, y[:, None], 1 - y[:, None])
    best_pooled = max(metrics.accuracy_score(y, pred[:, c]) for c in range(10))
    iv = bbc_interval(pred, y, metric="accuracy", n_bootstrap=500, random_state=0)
    assert abs(iv.estimate - 0.7) < best_pooled - 0.7


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"metric": "f1_macro"},
     r"metric 'f1_macro' is not supported .*accuracy, balanced_accuracy, neg_log_loss, neg_brier_score, roc_auc"),
    ({"metric": "accuracy", "select_metric": "precision"}, "select_metric 'precision' is not supported"),
    ({"metric": "accuracy", "n_bootstrap": 5}, "n_bootstrap must be an integer >= 10"),
    ({"metric": "accuracy", "level": 1.0}, "level must be a number strictly between 0 and 1"),
])
def test_bbc_refuses_what_it_cannot_compute(kwargs, message):
    y, proba = _binary_case()
    with pytest.raises(ValueError, match=message):
        bbc_interval(proba, y, **kwargs)


def test_bbc_refuses_inconsistent_predictions():
    y, proba = _binary_case()
    with pytest.raises(ValueError, match=r"n_rows = len\(y_true\) = 40; got \(39, 4\)"):
        bbc_interval(proba[:-1], y, metric="roc_auc")
    with pytest.raises(ValueError, match="3 columns per configuration but there are 2 classes"):
        bbc_interval(np.ones((40, 4, 3)) / 3, y, metric="neg_log_loss")
    with pytest.raises(ValueError, match="probabilities between 0 and 1"):
        bbc_interval(proba * 3, y, metric="neg_brier_score")
    with pytest.raises(ValueError, match="roc_auc is computed for two classes"):
        bbc_interval(_multiclass_case()[1], _multiclass_case()[0], metric="roc_auc")
    with pytest.raises(ValueError, match="every one of the 4 configurations has a missing"):
        bbc_interval(np.full((40, 4), np.nan), y, metric="roc_auc")
    with pytest.raises(ValueError, match=r"labels \['maybe'\] that are not among classes"):
        bbc_interval(np.stack([1 - proba, proba], axis=2), np.r_[["no"] * 39, ["maybe"]], metric="accuracy",
                     classes=["no", "yes"])


def test_no_warning_from_a_one_class_out_of_bag_sample():
    # Six rows, one positive: some out-of-bag samples have no positive, so their AUC is undefined and
    # left out of the mean and quantiles, silently and without a warning.
    y = np.array([0, 0, 0, 0, 0, 1])
    scores = np.linspace(0.1, 0.9, 12).reshape(6, 2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        iv = bbc_interval(scores, y, metric="roc_auc", n_bootstrap=50, random_state=0)
    assert 0 <= iv.low <= iv.high <= 1
