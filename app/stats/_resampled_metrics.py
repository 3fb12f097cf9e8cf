"""Scorers evaluated on many weighted resamples of the same rows at once, for the bootstrap of BBC-CV.

A resample is a row of a weights matrix ``W`` (n_resamples × n_rows): bootstrap counts, or 0/1 for
the rows left out. A metric evaluated under weights ``w`` equals the scikit-learn scorer on the rows
repeated ``w`` times, so a bootstrap sample is never materialised. Values are oriented as the
scorers are: greater is better (``neg_`` metrics are negated losses).
"""

from __future__ import annotations

import numpy as np

# A metric that is a mean over rows of a per-row value (or a function of a few such means) reduces to
# matrix products with W; ROC AUC needs each configuration's rows in score order.
_LABEL = ("accuracy", "balanced_accuracy")
_PROBABILITY = ("neg_log_loss", "neg_brier_score")
_RANKING = ("roc_auc",)
_REGRESSION = ("neg_mean_squared_error", "neg_root_mean_squared_error", "neg_mean_absolute_error", "r2")
SUPPORTED = _LABEL + _PROBABILITY + _RANKING + _REGRESSION


class ResampledMetric:
    """One scorer prepared on pooled predictions (n_rows × n_configs [× n_classes]) and true values."""

    def __init__(self, name: str, predictions: np.ndarray, y_true: np.ndarray, classes: np.ndarray | None):
        if name not in SUPPORTED:
            raise ValueError(f"metric {name!r} is not supported by the bootstrap of pooled predictions; "
                             f"use one of {', '.join(SUPPORTED)} (scikit-learn scorer names)")
        self.name = name
        self._ranking = name in _RANKING
        if name in _REGRESSION:
            self._prepare_regression(predictions, y_true)
        else:
            self._prepare_classification(predictions, y_true, classes)

    def all_configs(self, weights: np.ndarray) -> np.ndarray:
        """The metric of every configuration under every resample: shape (n_resamples, n_configs)."""
        if self._ranking:
            return _weighted_auc(weights, self._values, self._positive)
        return self._combine(weights @ self._values, weights, None)

    def chosen(self, weights: np.ndarray, configs: np.ndarray) -> np.ndarray:
        """The metric of configuration ``configs[b]`` under resample ``b``: shape (n_resamples,)."""
        if self._ranking:
            out = np.empty(weights.shape[0])
            for c in np.unique(configs):
                rows = configs == c
                out[rows] = _weighted_auc(weights[rows], self._values[:, [c]], self._positive)[:, 0]
            return out
        sums = np.einsum("bn,nb->b", weights, self._values[:, configs])
        return self._combine(sums, weights, configs)

    # Each kind sets self._values (n_rows × n_configs, one per-row value) and self._combine.

    def _prepare_regression(self, predictions: np.ndarray, y_true: np.ndarray) -> None:
        if predictions.ndim != 2:
            raise ValueError(f"{self.name} needs predictions of shape (n_rows, n_configs); got {predictions.shape}")
        y = _numeric(y_true, self.name)
        error = predictions - y[:, None]
        self._values = np.abs(error) if self.name == "neg_mean_absolute_error" else error**2
        if self.name == "r2":
            moments = np.column_stack([np.ones_like(y), y, y**2])

            def combine(sse, weights, configs):
                total, s1, s2 = (weights @ moments).T
                sst = s2 - s1**2 / total
                sst = sst if configs is not None else sst[:, None]
                with np.errstate(divide="ignore", invalid="ignore"):
                    return np.where(sst > 0, 1 - sse / np.where(sst > 0, sst, 1), np.nan)
        else:
            root = self.name == "neg_root_mean_squared_error"

            def combine(sums, weights, configs):
                mean = _per_weight(sums, weights, configs)
                return -(np.sqrt(mean) if root else mean)
        self._combine = combine

    def _prepare_classification(self, predictions, y_true, classes) -> None:
        classes = np.unique(y_true) if classes is None else np.asarray(classes)
        missing = np.setdiff1d(np.unique(y_true), classes)
        if missing.size:
            raise ValueError(f"y_true holds labels {missing[:5].tolist()} that are not among classes "
                             f"{classes.tolist()}")
        y_index = np.searchsorted(classes, y_true) if _sorted(classes) else \
            np.array([np.flatnonzero(classes == label)[0] for label in y_true])
        if predictions.ndim == 3 and predictions.shape[2] != classes.size:
            raise ValueError(f"predictions have {predictions.shape[2]} columns per configuration but there are "
                             f"{classes.size} classes ({classes.tolist()}); pass one column per class")
        if predictions.ndim not in (2, 3):
            raise ValueError(f"{self.name} needs predictions of shape (n_rows, n_configs) or "
                             f"(n_rows, n_configs, n_classes); got {predictions.shape}")
        if self.name in _LABEL:
            self._prepare_labels(predictions, y_true, y_index, classes)
        elif self.name in _RANKING or classes.size == 2:
            self._prepare_binary(predictions, y_index, classes)
        else:
            self._prepare_multiclass(predictions, y_index)

    def _prepare_labels(self, predictions, y_true, y_index, classes) -> None:
        if predictions.ndim == 3:
            correct = np.argmax(predictions, axis=2) == y_index[:, None]
        else:
            correct = predictions == np.asarray(y_true)[:, None]
        self._values = correct.astype(float)
        if self.name == "accuracy":
            self._combine = _per_weight
            return
        present = np.unique(y_index)
        members = (y_index[:, None] == present[None, :]).astype(float)  # n_rows × present classes

        def combine(_sums, weights, configs):
            counts = weights @ members  # resamples × classes
            hits = [weights @ (self._values * members[:, [k]]) for k in range(present.size)]
            hits = np.stack(hits, axis=-1)  # resamples × configs × classes
            if configs is not None:
                hits = hits[np.arange(configs.size), configs]
            else:
                counts = counts[:, None, :]
            with np.errstate(divide="ignore", invalid="ignore"):
                recall = np.where(counts > 0, hits / np.where(counts > 0, counts, 1), np.nan)
            return np.nanmean(recall, axis=-1)
        self._combine = combine

    def _prepare_binary(self, predictions, y_index, classes) -> None:
        if classes.size != 2:
            raise ValueError(f"{self.name} is computed for two classes here; got {classes.size} "
                             f"({classes.tolist()[:10]})")
        positive_score = predictions[:, :, 1] if predictions.ndim == 3 else predictions
        self._positive = (y_index == 1).astype(float)
        if self.name == "roc_auc":
            self._values = positive_score
            return
        _check_probabilities(positive_score, self.name)
        if self.name == "neg_log_loss":
            p_true = np.where(self._positive[:, None] == 1, positive_score, 1 - positive_score)
            self._values = -np.log(np.clip(p_true, _EPS, 1 - _EPS))
        else:
            self._values = (positive_score - self._positive[:, None]) ** 2
        self._combine = _negated_mean

    def _prepare_multiclass(self, predictions, y_index) -> None:
        if predictions.ndim != 3:
            raise ValueError(f"{self.name} with more than two classes needs probabilities of shape "
                             f"(n_rows, n_configs, n_classes); got {predictions.shape}")
        _check_probabilities(predictions, self.name)
        p_true = predictions[np.arange(y_index.size), :, y_index]
        if self.name == "neg_log_loss":
            self._values = -np.log(np.clip(p_true, _EPS, 1 - _EPS))
        else:
            self._values = (predictions**2).sum(axis=2) - 2 * p_true + 1
        self._combine = _negated_mean


_EPS = np.finfo(float).eps  # scikit-learn's log_loss clips probabilities to [eps, 1 - eps]


def _per_weight(sums, weights, configs):
    total = weights.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return sums / (total if configs is not None else total[:, None])


def _negated_mean(sums, weights, configs):
    return -_per_weight(sums, weights, configs)


def _weighted_auc(weights: np.ndarray, scores: np.ndarray, positive: np.ndarray) -> np.ndarray:
    """ROC AUC of every column of ``scores`` under each row of ``weights`` (integer counts), ties one half.

    Equals the Mann-Whitney statistic of the rows repeated by their weights, which is what
    scikit-learn's roc_auc_score gives on the repeated rows. For a positive row ``i`` the weight of
    negatives scored below it is a cumulative sum over the negatives in score order, read at the
    positions ``searchsorted`` gives; all in integers, so equal AUCs stay exactly equal.
    Returns shape (n_resamples, n_columns).
    """
    # rows × resamples, so that gathering rows is contiguous; int32 halves the memory traffic, and the
    # sums below stay far from its limit (at most twice the rows squared, summed in int64).
    counts = np.ascontiguousarray(weights.T).astype(np.int32)
    is_pos = positive == 1
    pos_counts, neg_counts = counts[is_pos], counts[~is_pos]
    n_pos, n_neg = pos_counts.sum(axis=0), neg_counts.sum(axis=0)
    out = np.empty((weights.shape[0], scores.shape[1]))
    cumulative = np.zeros((neg_counts.shape[0] + 1, weights.shape[0]), dtype=np.int32)
    for c in range(scores.shape[1]):
        neg_scores, pos_scores = scores[~is_pos, c], scores[is_pos, c]
        order = np.argsort(neg_scores, kind="stable")
        np.cumsum(neg_counts[order], axis=0, out=cumulative[1:])
        sorted_neg = neg_scores[order]
        below = cumulative[np.searchsorted(sorted_neg, pos_scores, side="left")]
        below += cumulative[np.searchsorted(sorted_neg, pos_scores, side="right")]  # ties counted twice: ½
        twice = np.einsum("ib,ib->b", pos_counts, below, dtype=np.int64)
        with np.errstate(divide="ignore", invalid="ignore"):
            out[:, c] = twice / (2.0 * n_pos * n_neg)
    return np.where(((n_pos > 0) & (n_neg > 0))[:, None], out, np.nan)


def _numeric(y_true: np.ndarray, name: str) -> np.ndarray:
    try:
        y = np.asarray(y_true, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} needs numeric y_true; got values such as {y_true[:3].tolist()}") from exc
    if not np.all(np.isfinite(y)):
        raise ValueError(f"y_true must be finite for {name}; got non-finite values at rows "
                         f"{np.flatnonzero(~np.isfinite(y))[:5].tolist()}")
    return y


def _check_probabilities(values: np.ndarray, name: str) -> None:
    if values.dtype.kind not in "fiu" or np.any((values < 0) | (values > 1)):
        raise ValueError(f"{name} needs predicted probabilities between 0 and 1; got values from "
                         f"{np.min(values)!r} to {np.max(values)!r}")


def _sorted(classes: np.ndarray) -> bool:
    return bool(np.all(classes[:-1] < classes[1:])) if classes.size > 1 else True
