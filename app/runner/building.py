"""Turn the fits of a run into the payload that describes it."""

from __future__ import annotations

import base64
import platform
import warnings
from importlib.metadata import PackageNotFoundError, version

import numpy as np
import skops.io

from foldwise.payload import (
    AssessmentPayload,
    Configuration,
    Design,
    Failure,
    Family,
    FittedModel,
    FoldChoice,
    InnerScores,
    OuterFold,
    OuterScores,
    Prediction,
    canonical_params,
)
from foldwise.runner.fitting import FitResult
from foldwise.runner.keeping import REFITS_INSTEAD, estimator_class
from foldwise.runner.metadata import without_requests
from foldwise.runner.space import Space
from foldwise.runner.splits import Layout
from foldwise.trust import refused_types

_FLOAT_COLUMNS = ("score", "fit_time", "score_time")
_RECORDED_PACKAGES = ("foldwise", "scikit-learn", "numpy", "scipy", "pandas", "joblib")


def build_payload(*, name, dataset, space: Space, layout: Layout, y, metrics, classes, classifier,
                  results: dict[tuple, FitResult], choices, refit_all, n_features, grouped,
                  selected_by: str = "inner_mean", scorers: dict[str, str] | None = None,
                  trusted: list[str] = ()) -> AssessmentPayload:
    splits, targets = layout.splits, np.asarray(y)
    inner, outer = _columns(metrics, True), _columns(metrics, False)
    predictions, failures, models = [], [], []
    allowed = {estimator_class(estimator) for estimator in space.estimators.values()}
    left_out: dict[str, list] = {}  # family -> the models the loader would refuse, and why
    for key in sorted(results):
        result = results[key]
        split = splits[key[1]]
        where = {"repeat": split.repeat, "outer_fold": split.outer_fold, "config": key[-1]}
        if key[0] == "inner":
            _append(inner, result, where, inner_fold=key[2])
        else:
            _append(outer, result, where)
            if result.prediction is not None:
                kind, values = result.prediction
                predictions.append(Prediction.from_array(values, kind=kind, **where))
            text = None if result.model is None else _skops_text(result.model, "a fitted fold winner")
            types = [] if text is None else refused_types(base64.b64decode(text), allowed=allowed, libraries=trusted)
            if types:  # a fitted model may hold types its unfitted estimator did not
                left_out.setdefault(space.candidates[key[-1]].family, []).append(types)
            elif text is not None:
                models.append(FittedModel(skops=text, **where))
        inner_fold = key[2] if key[0] == "inner" else None
        if result.error:
            failures.append(Failure(level=key[0], inner_fold=inner_fold, stage="fit", message=result.error,
                                    **where))
        failures += [Failure(level=key[0], inner_fold=inner_fold, stage=problem.stage, metric=problem.metric,
                             message=problem.message, **where) for problem in result.problems]

    family_winners, overall_winners = [], []
    for split, (winners, overall) in zip(splits, choices, strict=True):
        fold = {"repeat": split.repeat, "outer_fold": split.outer_fold}
        family_winners += [FoldChoice(config=c, **fold) for c in winners if c is not None]
        if overall is not None:  # else every configuration failed there: a failed fold, its fits in failures
            overall_winners.append(FoldChoice(config=overall, **fold))

    _warn_left_out(left_out)
    return AssessmentPayload(
        name=name, dataset=dataset,
        design=Design(
            task="classification" if classifier else "regression", n_samples=len(targets),
            n_features=n_features, n_repeats=layout.n_repeats, n_outer_folds=layout.n_outer_folds,
            n_inner_folds=layout.n_inner_folds, outer_splitter=layout.outer_splitter,
            inner_splitter=layout.inner_splitter, grouped=grouped, refit_all=refit_all, metrics=metrics,
            scorers=scorers or {}, classes=classes, selected_by=selected_by, trusted=list(trusted)),
        families=[Family(name=family, estimator=repr(estimator),
                         estimator_class=estimator_class(estimator),
                         estimator_skops=_skops_text(estimator, f"family {family!r}'s estimator"))
                  for family, estimator in space.estimators.items()],
        configurations=[Configuration(id=c.id, family=c.family, params=canonical_params(c.params))
                        for c in space.candidates],
        outer_folds=[OuterFold(repeat=s.repeat, outer_fold=s.outer_fold, n_train=len(s.train),
                               test_indices=s.test.tolist(), y_true=targets[s.test].tolist()) for s in splits],
        inner_scores=InnerScores(**_arrays(inner)), outer_scores=OuterScores(**_arrays(outer)),
        family_winners=family_winners, overall_winners=overall_winners,
        predictions=predictions, failures=failures, models=models,
        versions=package_versions(), seeds=_seeds(space, layout),
        total_fit_time=float(sum(result.fit_time - result.inherited_time for result in results.values())),
    )


def package_versions() -> dict[str, str]:
    found = {"python": platform.python_version()}
    for package in _RECORDED_PACKAGES:
        try:
            found[package] = version(package)
        except PackageNotFoundError:
            pass
    return found


def _skops_text(estimator, what: str) -> str | None:
    """base64 of the skops file of ``estimator``; None, with a warning, when skops cannot write it.

    ``bytes`` are a skops file already (the journal wrote the model when it arrived)."""
    try:
        data = estimator if isinstance(estimator, bytes) else skops.io.dumps(without_requests(estimator))
        return base64.b64encode(data).decode("ascii")
    except Exception as error:  # skops refuses some objects (open files, lambdas): the run still counts
        warnings.warn(f"skops could not write {what} ({type(error).__name__}: {error}); it is not kept, so "
                      f"an ensemble using it must be built from your own space", RuntimeWarning, stacklevel=4)
        return None


def _warn_left_out(left_out: dict[str, list]) -> None:
    if not left_out:
        return
    said = "; ".join(f"{len(found)} of family {family!r} (holding {sorted({t for types in found for t in types})})"
                     for family, found in left_out.items())
    warnings.warn(f"keep_models: {sum(map(len, left_out.values()))} fitted fold winners hold types the store's "
                  f"loader does not trust: {said}; " + REFITS_INSTEAD, RuntimeWarning, stacklevel=4)


def _columns(metrics, inner: bool) -> dict[str, list]:
    names = ["repeat", "outer_fold", "config", "metric", "score", "fit_time", "score_time"]
    return {name: [] for name in names + (["inner_fold"] if inner else [])}


def _arrays(columns: dict[str, list]) -> dict[str, np.ndarray]:
    """The columns as the payload keeps them: float64 scores and times (NaN for a failed fit), int64 positions."""
    return {name: np.array(values, dtype=np.float64 if name in _FLOAT_COLUMNS else np.int64)
            for name, values in columns.items()}


def _append(columns, result: FitResult, where, **extra) -> None:
    for position, metric in enumerate(result.scores):
        score = result.scores[metric]
        for name, value in {**where, **extra}.items():
            columns[name].append(value)
        columns["metric"].append(position)
        columns["score"].append(score)  # NaN for a failed fit, as the payload keeps it
        columns["fit_time"].append(result.fit_time)
        columns["score_time"].append(result.score_time)


def _seeds(space: Space, layout: Layout) -> dict:
    seeds = {"outer_splitter": layout.outer_splitter, "inner_splitter": layout.inner_splitter}
    for family, estimator in space.estimators.items():
        found = {key: repr(value) for key, value in estimator.get_params().items()
                 if key == "random_state" or key.endswith("__random_state")}
        if found:
            seeds[family] = found
    if space.drawn:  # random-search families: how their candidates were drawn (the candidates are the configurations)
        seeds["drawn candidates"] = space.drawn
    return seeds
