"""What the runner scores with: any ``scoring`` scikit-learn accepts, each metric failing on its own.

``scoring`` may be a scorer name, a list of names, a dict ``{name: scorer or name}``, a scorer object
(``make_scorer(...)``) or a callable ``(estimator, X, y) -> float``, as ``GridSearchCV`` and
``cross_validate`` take it. The first metric selects. A single scorer object or callable is named
``"score"``, as scikit-learn names it in ``cv_results_`` (``mean_test_score``); a dict's keys name its
scorers. The payload records the names (``design.metrics``) and, in ``seeds["scorers"]``, what each
custom scorer was.

Scoring goes through scikit-learn's ``_MultimetricScorer``, which calls each response method
(``predict_proba``, ...) once for all scorers and, with ``raise_exc=False``, hands back a failing
scorer's traceback in place of its score: that metric alone is NaN, as in ``GridSearchCV(...,
error_score=np.nan)``, and the others keep their scores.
"""

from __future__ import annotations

import math
import numbers
import traceback
from dataclasses import dataclass, field
from inspect import signature
from typing import Any

import numpy as np
from sklearn.metrics import check_scoring, get_scorer, get_scorer_names
from sklearn.metrics._scorer import _MultimetricScorer
from sklearn.utils.metadata_routing import _routing_enabled, process_routing

SINGLE_SCORER_NAME = "score"  # scikit-learn's name for the one metric of a scorer object or callable


@dataclass(frozen=True)
class FitProblem:
    """Something that failed in one fit: the whole fit (``metric`` None, stage "fit"), one metric's
    scoring (stage "score") or the outer-test predictions (stage "predict", ``metric`` None)."""

    stage: str
    metric: int | None
    message: str


@dataclass
class Scoring:
    """The metrics of a run, their scorers, and what a failure does (``error_score``)."""

    metrics: list[str]  # names, the selecting one first
    scorers: dict[str, Any]
    error_score: Any = np.nan  # np.nan: record and carry on; "raise": stop with the original exception
    custom: dict[str, str] = field(default_factory=dict)  # name -> repr, for scorers that are not names

    @property
    def raises(self) -> bool:
        return isinstance(self.error_score, str)

    @property
    def combined(self) -> _MultimetricScorer:
        """scikit-learn's scorer of several metrics, predictions shared between them."""
        return _MultimetricScorer(scorers=self.scorers, raise_exc=self.raises)

    def score(self, model, X_test, y_test, params: dict) -> tuple[dict[str, float], list[FitProblem]]:
        """Each metric's score of a fitted model, NaN (with a problem naming why) where it failed."""
        try:
            results = self.combined(model, X_test, y_test, **params)
        except Exception:
            if self.raises:
                raise
            # Raised before any scorer ran (e.g. a response method missing for one scorer, found
            # while deciding whether to share predictions): score the metrics one by one instead.
            results = self._one_by_one(model, X_test, y_test, params)
        scores, problems = {}, []
        for position, name in enumerate(self.metrics):
            value = results[name]
            if isinstance(value, BaseException | str):
                message = exception_text(value)
            else:
                number = _number(value)
                if number is None:
                    message = (f"ValueError: scorer {name!r} returned {type(value).__name__}, not a number "
                               "(a callable giving several metrics can be passed as a dict of scorers)")
                    if self.raises:
                        raise ValueError(message.removeprefix("ValueError: "))
                elif math.isnan(number):
                    message = f"scorer {name!r} returned NaN"
                else:
                    scores[name] = number
                    continue
            scores[name] = math.nan
            problems.append(FitProblem("score", position, message))
        return scores, problems

    def _one_by_one(self, model, X_test, y_test, params: dict) -> dict[str, Any]:
        routed = process_routing(self.combined, "score", **params) if _routing_enabled() else None
        results = {}
        for name, scorer in self.scorers.items():
            if routed is not None:
                mine = routed[name].score
            else:
                mine = {key: value for key, value in params.items() if key != "sample_weight"}
                if "sample_weight" in params and accepts_sample_weight(scorer):
                    mine["sample_weight"] = params["sample_weight"]
            try:
                results[name] = scorer(model, X_test, y_test, **mine)
            except Exception as error:
                results[name] = error
        return results


def resolve_scoring(scoring, estimator, *, classifier: bool, error_score=np.nan) -> Scoring:
    """Metric names and scorers from any ``scoring`` scikit-learn accepts; ``None`` is accuracy or r2."""
    _check_error_score(error_score)
    if scoring is None:
        scoring = "accuracy" if classifier else "r2"
    if isinstance(scoring, str):
        scoring = [scoring]
    if isinstance(scoring, list | tuple):
        if not scoring or not all(isinstance(name, str) for name in scoring):
            raise TypeError(f"scoring as a list must hold scorer names, got {scoring!r}")
        _refuse_repeats(list(scoring))
        _refuse_unknown(list(scoring))
        return Scoring(list(scoring), {name: check_scoring(estimator, scoring=name) for name in scoring},
                       error_score)
    if isinstance(scoring, dict):
        return _from_dict(scoring, estimator, error_score)
    if callable(scoring):
        return Scoring([SINGLE_SCORER_NAME], {SINGLE_SCORER_NAME: scoring}, error_score,
                       {SINGLE_SCORER_NAME: _described(scoring)})
    raise TypeError(f"scoring must be a scorer name, a list of names, a dict {{name: scorer}}, a scorer object "
                    f"(make_scorer(...)) or a callable (estimator, X, y) -> float; got {scoring!r}")


def selecting_first(scoring, refit):
    """A search scoring several metrics selects by the one its ``refit`` names: put that one first."""
    if isinstance(refit, str) and isinstance(scoring, list | tuple) and refit in scoring:
        return [refit, *(name for name in scoring if name != refit)]
    if isinstance(refit, str) and isinstance(scoring, dict) and refit in scoring:
        return {refit: scoring[refit], **{name: s for name, s in scoring.items() if name != refit}}
    return scoring


def accepts_sample_weight(scorer) -> bool:
    """Whether a scorer takes ``sample_weight`` when routing is off (scikit-learn's own test, where it has
    one; else the callable's signature)."""
    if hasattr(scorer, "_accept_sample_weight"):
        return bool(scorer._accept_sample_weight())
    if hasattr(scorer, "_score_func"):  # a scorer from a scikit-learn without _accept_sample_weight
        return _takes(scorer._score_func, "sample_weight")
    return _takes(scorer, "sample_weight")


def exception_text(error: BaseException | str) -> str:
    """An exception as its type and message ("ValueError: ..."), from the exception or from a traceback
    as ``traceback.format_exc`` wrote it (what ``_MultimetricScorer`` hands back)."""
    if isinstance(error, BaseException):
        return "".join(traceback.format_exception_only(error)).strip()[:10_000]
    lines = error.rstrip().splitlines()
    frames = [i for i, line in enumerate(lines) if line.startswith('  File "')]
    start = frames[-1] + 1 if frames else 0
    while start < len(lines) and lines[start].startswith("    "):  # the frame's source line and markers
        start += 1
    return "\n".join(lines[start:]).strip()[:10_000] or error.strip()[-10_000:]


def _from_dict(scoring: dict, estimator, error_score) -> Scoring:
    if not scoring:
        raise ValueError("scoring is an empty dict; name at least one scorer")
    scorers, custom = {}, {}
    for name, given in scoring.items():
        if not isinstance(name, str) or not name:
            raise TypeError(f"scoring's keys name the metrics and must be non-empty strings, got {name!r}")
        if isinstance(given, str):
            _refuse_unknown([given])
        elif not callable(given):
            raise TypeError(f"scoring[{name!r}] must be a scorer name or a callable (estimator, X, y), "
                            f"got {given!r}")
        scorer = check_scoring(estimator, scoring=given)
        if name in get_scorer_names() and repr(scorer) != repr(get_scorer(name)):
            # Pages recompute a named metric with scikit-learn's scorer of that name (ensembles).
            raise ValueError(f"scoring[{name!r}] is {_described(given)}, not scikit-learn's {name!r} scorer; "
                             f"give it a name of its own (e.g. {name + '_custom'!r})")
        scorers[name] = scorer
        if name not in get_scorer_names():  # a name of one's own: say what it scores
            custom[name] = given if isinstance(given, str) else _described(given)
    return Scoring(list(scorers), scorers, error_score, custom)


def _check_error_score(error_score) -> None:
    if isinstance(error_score, str) and error_score == "raise":
        return
    if isinstance(error_score, numbers.Real) and math.isnan(error_score):
        return
    raise ValueError(f"error_score must be np.nan (a failed fit or metric is kept as NaN and counted) or "
                     f"'raise' (stop at the first failure with its traceback), got {error_score!r}")


def _refuse_unknown(names: list[str]) -> None:
    unknown = sorted(set(names) - set(get_scorer_names()))
    if unknown:
        raise ValueError(f"unknown scorer names {unknown}; see sklearn.metrics.get_scorer_names(), or pass a "
                         f"scorer object (make_scorer) or a dict {{name: scorer}}")


def _refuse_repeats(names: list[str]) -> None:
    if len(set(names)) != len(names):
        raise ValueError(f"scoring names a metric twice: {names}")


def _described(scorer) -> str:
    """``make_scorer(fbeta_score, ..., beta=2)`` for a scorer object, the name of a function."""
    return (getattr(scorer, "__qualname__", None) or repr(scorer))[:500]


def _number(value) -> float | None:
    if hasattr(value, "item"):
        try:
            value = value.item()  # a numpy scalar, or a one-element array
        except ValueError:
            return None
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        return None
    return float(value)


def _takes(function, name: str) -> bool:
    try:
        return name in signature(function).parameters
    except (TypeError, ValueError):
        return False
