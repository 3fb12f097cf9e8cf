r"""Scoring an ensemble of configurations from their stored outer-test predictions.

Each member was refit on an outer fold's training set and predicted that fold's test rows; averaging
those predictions gives what a voting ensemble of the members, fitted on the same training set, would
predict there. Scores come from scikit-learn's own scorers (``sklearn.metrics.get_scorer``), called on
a stand-in that hands back the averaged predictions, so every scorer name means what it means there.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn import config_context
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.metrics import get_scorer, get_scorer_names

KINDS = ("proba", "decision", "predict")
# Said beside every ensemble estimate: the members may have been picked by looking at these same folds.
ESTIMATE_CAUTION = ("This reuses the outer test folds: honest for a rule fixed in advance (such as all "
                    "overall fold winners), optimistic for members picked by hand after seeing these scores.")
VOTING_TEXT = {
    "soft": "soft voting: the members' class probabilities averaged",
    "hard": "hard voting: the majority of the members' predicted labels, ties to the first class",
    "mean": "the mean of the members' predictions",
}


@dataclass(frozen=True)
class FoldMembers:
    """The members' predictions on one outer fold's test rows, in member order.

    ``predictions`` holds one ``(kind, values)`` per member, ``values`` of shape (n_test, n_columns);
    None when some member has no prediction on this fold (its fit failed, or it was not refit here).
    """

    repeat: int
    outer_fold: int
    y_true: Sequence
    predictions: list[tuple[str, np.ndarray]] | None


@dataclass(frozen=True)
class EnsembleScores:
    voting: str  # "soft", "hard" or "mean"
    scores: pd.DataFrame  # repeat, outer_fold, metric, score (NaN where the fold could not be scored)
    unavailable: dict[str, str]  # metric -> why the stored predictions cannot give it


def voting_for(kinds, *, task: str) -> str:
    """The combination rule the members' prediction kinds allow.

    Parameters
    ----------
    kinds : iterable of str
        The kinds of every stored prediction of every member: "proba", "decision" or "predict".
    task : {"classification", "regression"}

    Returns
    -------
    str
        "mean" for regression; "soft" when every prediction holds class probabilities, else "hard".

    Notes
    -----
    As ``VotingClassifier`` offers soft voting only when every member has ``predict_proba``.

    References
    ----------
    Pedregosa, F. et al. (2011). Scikit-learn: machine learning in Python. Journal of Machine
    Learning Research 12, 2825-2830 (``VotingClassifier``, ``VotingRegressor``).

    Examples
    --------
    >>> voting_for(["proba", "proba"], task="classification"), voting_for(["proba", "decision"],
    ...                                                                     task="classification")
    ('soft', 'hard')
    """
    kinds = set(kinds)
    unknown = kinds - set(KINDS)
    if unknown or task not in ("classification", "regression"):
        raise ValueError(f"kinds must be among {KINDS} and task 'classification' or 'regression'; "
                         f"received kinds {sorted(unknown)} and task {task!r}")
    if task == "regression":
        return "mean"
    return "soft" if kinds <= {"proba"} else "hard"


def combine_predictions(predictions: Sequence[tuple[str, np.ndarray]], *, voting: str,
                        n_classes: int | None = None) -> np.ndarray:
    r"""Average the members' predictions of the same rows, as a voting ensemble would.

    Parameters
    ----------
    predictions : sequence of (kind, values)
        One per member; ``values`` of shape (n_rows, n_columns), or (n_rows,). Probabilities come in the class
        order of the assessment, a "predict" of a classifier is the class position (as a float).
    voting : {"soft", "hard", "mean"}
    n_classes : int, optional
        Needed for hard voting.

    Returns
    -------
    ndarray
        Soft: the mean probabilities, shape (n_rows, n_classes). Hard: the winning class position per
        row. Mean: the mean prediction per row.

    Notes
    -----
    With :math:`M` members, soft voting gives :math:`\bar p(c \mid x) = \frac1M \sum_m p_m(c \mid x)`
    and the label :math:`\arg\max_c \bar p(c \mid x)`; hard voting the label
    :math:`\arg\max_c \sum_m [\hat y_m(x) = c]`, the first class winning a tie; regression
    :math:`\frac1M \sum_m \hat y_m(x)`. In hard voting a member's label is the arg max of its
    probabilities, the sign of a single decision value (positive: the second class) or the arg max
    of several, which is its ``predict`` for most scikit-learn classifiers (not for
    ``SVC(probability=True)``, whose probabilities come from a separate calibration).

    References
    ----------
    Kittler, J., Hatef, M., Duin, R. P. W. and Matas, J. (1998). On combining classifiers. IEEE
    Transactions on Pattern Analysis and Machine Intelligence 20(3), 226-239.
    Kuncheva, L. I. (2004). Combining Pattern Classifiers: Methods and Algorithms. Wiley.

    Examples
    --------
    >>> a = ("proba", np.array([[0.9, 0.1], [0.4, 0.6]]))
    >>> b = ("proba", np.array([[0.5, 0.5], [0.8, 0.2]]))
    >>> combine_predictions([a, b], voting="soft")
    array([[0.7, 0.3],
           [0.6, 0.4]])
    >>> combine_predictions([a, b, ("predict", np.array([[1.0], [1.0]]))], voting="hard", n_classes=2)
    array([0, 1])
    """
    if not predictions:
        raise ValueError("an ensemble needs at least one member's predictions; received none")
    values = [np.asarray(array, dtype=float) for _, array in predictions]
    values = [array.reshape(len(array), -1) for array in values]  # one column may come as a vector
    if len({array.shape[0] for array in values}) > 1:
        raise ValueError(f"members predicted different numbers of rows: "
                         f"{[array.shape[0] for array in values]}")
    if voting == "soft":
        return np.average(np.asarray(values), axis=0)  # as VotingClassifier.predict_proba
    if voting == "mean":
        return np.average(np.column_stack([array[:, 0] for array in values]), axis=1)  # as VotingRegressor
    if voting != "hard" or not n_classes:
        raise ValueError(f"voting must be 'soft', 'hard' (with n_classes) or 'mean'; received {voting!r} "
                         f"and n_classes={n_classes!r}")
    votes = np.zeros((values[0].shape[0], n_classes))
    for (kind, _), array in zip(predictions, values, strict=True):
        votes[np.arange(len(array)), _labels(kind, array)] += 1
    return np.argmax(votes, axis=1)  # the first of tied classes, as np.bincount(...).argmax()


def score_combined(combined: np.ndarray, y_true, *, voting: str, metric: str, classes=None) -> float:
    """A scikit-learn scorer's value for the combined predictions of one outer fold.

    Parameters
    ----------
    combined : ndarray
        The output of :func:`combine_predictions`.
    y_true : array-like
        The true targets of the rows, in the same order.
    voting : {"soft", "hard", "mean"}
    metric : str
        A name from ``sklearn.metrics.get_scorer_names()``.
    classes : array-like, optional
        The class labels in the order of the probability columns (classification).

    Returns
    -------
    float
        The scorer's value (greater is better, as scikit-learn orients every scorer).

    Notes
    -----
    The scorer is called on a stand-in estimator whose ``predict_proba`` (soft voting only) and
    ``predict`` return the combined predictions, with ``classes_`` the given classes: exactly the
    methods a ``VotingClassifier`` of that voting, or a ``VotingRegressor``, offers. A scorer that
    needs a method the ensemble lacks (``roc_auc`` under hard voting) raises ``AttributeError``.

    References
    ----------
    Pedregosa, F. et al. (2011). Scikit-learn: machine learning in Python. Journal of Machine
    Learning Research 12, 2825-2830.

    Examples
    --------
    >>> proba = np.array([[0.7, 0.3], [0.6, 0.4], [0.2, 0.8]])
    >>> score_combined(proba, [0, 1, 1], voting="soft", metric="accuracy", classes=[0, 1])
    0.6666666666666666
    """
    return _score_with(_scorer(metric), combined, y_true, voting=voting, classes=classes)


def _scorer(metric: str):
    if metric not in get_scorer_names():
        raise ValueError(f"metric {metric!r} is not a scikit-learn scorer name; see "
                         f"sklearn.metrics.get_scorer_names()")
    return get_scorer(metric)  # a fresh copy of the scorer each call: get it once per metric


def _score_with(scorer, combined: np.ndarray, y_true, *, voting: str, classes) -> float:
    y_true = np.asarray(y_true)
    if len(y_true) != len(combined):
        raise ValueError(f"{len(y_true)} true targets for {len(combined)} predicted rows")
    stand_in = {"soft": _SoftVotes, "hard": _HardVotes, "mean": _MeanPrediction}[voting](combined, classes)
    return float(scorer(stand_in, np.zeros((len(combined), 1)), y_true))


def score_ensemble(folds: Sequence[FoldMembers], *, task: str, metrics: Sequence[str],
                   classes=None) -> EnsembleScores:
    """Score an ensemble on every outer fold with every metric its predictions allow.

    Parameters
    ----------
    folds : sequence of FoldMembers
        One per outer fold (over all repeats), members in the same order in each.
    task : {"classification", "regression"}
    metrics : sequence of str
        scikit-learn scorer names.
    classes : array-like, optional
        Class labels in the order of the stored probability columns (classification).

    Returns
    -------
    EnsembleScores
        ``voting`` (from :func:`voting_for`), ``scores`` (one row per fold and available metric, NaN
        where a member had no prediction or the scorer failed on that fold) and ``unavailable``
        (metric -> reason, for metrics no fold could give).

    Notes
    -----
    Per fold: :func:`combine_predictions` then :func:`score_combined`. On each outer fold this equals
    refitting a ``VotingClassifier`` (or ``VotingRegressor``) of the members on the outer training set
    and scoring it on the outer test set.

    References
    ----------
    Kuncheva, L. I. (2004). Combining Pattern Classifiers: Methods and Algorithms. Wiley.

    Examples
    --------
    >>> fold = FoldMembers(0, 0, [1.0, 2.0], [("predict", np.array([[1.0], [3.0]])),
    ...                                        ("predict", np.array([[1.0], [1.0]]))])
    >>> result = score_ensemble([fold], task="regression", metrics=["neg_mean_absolute_error"])
    >>> result.voting, result.scores["score"].tolist()
    ('mean', [-0.0])
    """
    complete = [fold for fold in folds if fold.predictions is not None]
    if not complete:
        raise ValueError(f"none of the {len(folds)} outer folds has a prediction from every member")
    voting = voting_for([kind for fold in complete for kind, _ in fold.predictions], task=task)
    n_classes = None if classes is None else len(classes)
    combined = {(fold.repeat, fold.outer_fold): combine_predictions(fold.predictions, voting=voting,
                                                                    n_classes=n_classes) for fold in complete}
    rows, unavailable = [], {}
    # The arguments are ours, so the metrics' argument checks (a third of their time) can go.
    with config_context(skip_parameter_validation=True):
        for metric in metrics:
            if metric not in get_scorer_names():  # a scorer of the user's own, which only the run had
                unavailable[metric] = (f"{metric!r} is a scorer of the run's own, not a scikit-learn scorer name, "
                                       f"so it cannot be recomputed from stored predictions")
                continue
            rows += _scored_metric(folds, combined, metric, voting=voting, classes=classes,
                                   unavailable=unavailable)
    frame = pd.DataFrame(rows, columns=["repeat", "outer_fold", "metric", "score"])
    frame = frame.astype({"repeat": "int64", "outer_fold": "int64", "score": "float64"})
    return EnsembleScores(voting, frame, unavailable)


def _scored_metric(folds, combined: dict, metric: str, *, voting: str, classes, unavailable: dict) -> list[tuple]:
    """One metric's (repeat, outer_fold, metric, score) rows; none, and a reason in ``unavailable``, when no
    fold could be scored with it."""
    scores, errors, scorer = [], [], _scorer(metric)
    for fold in folds:
        key = (fold.repeat, fold.outer_fold)
        score = np.nan
        if key in combined:
            try:
                score = _score_with(scorer, combined[key], fold.y_true, voting=voting, classes=classes)
            except (AttributeError, TypeError, ValueError) as error:
                errors.append(_reason(metric, voting, error))
        scores.append((*key, metric, score))
    if len(errors) == len(combined):
        unavailable[metric] = errors[0]
        return []
    return scores


def _labels(kind: str, values: np.ndarray) -> np.ndarray:
    if kind == "predict":
        return values[:, 0].astype(np.int64)
    if kind == "decision" and values.shape[1] == 1:
        return (values[:, 0] > 0).astype(np.int64)  # as LinearClassifierMixin.predict
    return np.argmax(values, axis=1)


def _reason(metric: str, voting: str, error: Exception) -> str:
    if isinstance(error, AttributeError):
        return (f"{metric} needs class probabilities or decision values, which {VOTING_TEXT[voting]} "
                f"does not give")
    return f"{metric} failed on these predictions: {error}"


class _Votes(BaseEstimator):
    """Stands in for the fitted ensemble: hands back the combined predictions of the rows scored."""

    def __init__(self, combined, classes):
        self.combined, self.classes = combined, classes

    def _rows(self, X) -> None:
        if len(X) != len(self.combined):
            raise ValueError(f"asked for {len(X)} rows, holds predictions of {len(self.combined)}")


class _SoftVotes(ClassifierMixin, _Votes):
    def __init__(self, combined, classes):
        super().__init__(combined, classes)
        self.classes_ = np.asarray(classes)

    def predict_proba(self, X):
        self._rows(X)
        return self.combined

    def predict(self, X):
        self._rows(X)
        return self.classes_[np.argmax(self.combined, axis=1)]


class _HardVotes(ClassifierMixin, _Votes):
    def __init__(self, combined, classes):
        super().__init__(combined, classes)
        self.classes_ = np.asarray(classes)

    def predict(self, X):
        self._rows(X)
        return self.classes_[self.combined]


class _MeanPrediction(RegressorMixin, _Votes):
    def predict(self, X):
        self._rows(X)
        return self.combined
