"""Nested cross-validation around a search object foldwise cannot expand (successive halving, ...).

The search is fitted whole on each outer training set, one task per outer fold in the one pool, and
its ``cv_results_`` are recorded as inner scores; its own ``best_index_`` picks the fold winner, which
is the only configuration refit and scored on the outer test set. Inner scores exist only for the
metrics the search itself scored; the others are NaN there.
"""

from __future__ import annotations

import time
import traceback
import warnings

import numpy as np
from sklearn.base import clone, is_classifier
from sklearn.utils import _safe_indexing
from sklearn.utils.parallel import Parallel, delayed  # carries sklearn's config into the workers

from foldwise.assessment import Assessment
from foldwise.runner.building import build_payload
from foldwise.runner.canonical import digest, identify
from foldwise.runner.fitting import FitResult, outer_predictions
from foldwise.runner.progress import progress_bar
from foldwise.runner.scoring import resolve_scoring
from foldwise.runner.space import Candidate, Space
from foldwise.runner.splits import lay_out


def nested_whole_search(search, X, y, *, family, outer, scoring, groups, n_jobs, progress, name, dataset,
                        keep_predictions) -> Assessment:
    """``scoring`` is the search's own or one that selects alike (``foldwise.runner.searches``)."""
    from foldwise.runner.nested import resolve_metrics

    classifier = is_classifier(search.estimator)
    scorer = resolve_scoring(scoring, search.estimator, classifier=classifier)
    metrics = scorer.metrics
    # A one-metric search's cv_results_ call its scores "score"; name them for what they measure.
    single = not isinstance(search.scoring, list | tuple | dict)
    searched = resolve_metrics(search.scoring, classifier)[0] if single else None
    layout = lay_out(X, y, groups, outer=outer, inner=search.cv, classifier=classifier)
    classes = np.unique(np.asarray(y)).tolist() if classifier else None
    with progress_bar(total=len(layout.splits), unit="search", desc=name or "nested cv", disable=not progress) as bar:
        folds = []
        for fold in Parallel(n_jobs=n_jobs, return_as="generator")(
                delayed(_fit_search)(search, X, y, groups, split.train, split.test, scorer, metrics, classes,
                                     keep_predictions, searched) for split in layout.splits):
            folds.append(fold)
            bar.update(1)

    # One configuration per description, however many folds (or halving rounds) evaluated it.
    identified = identify(family, [params for fold in folds for params in fold["params"]], warn=False)
    candidates = [Candidate(family, params, ident) for params, ident, _ in identified]
    position = {key: i for i, (_, _, key) in enumerate(identified)}
    results, choices = {}, []
    for s, fold in enumerate(folds):
        ids = [digest(family, params) for params in fold["params"]]
        for c, ident in enumerate(ids):  # a config evaluated again later (more resources) keeps the last
            for i in range(layout.n_inner_folds):
                scores = {metric: fold["inner"][metric][c][i] for metric in metrics}
                results[("inner", s, i, position[ident])] = FitResult(
                    ("inner", s, i, position[ident]), scores, fold["fit_time"][c], fold["score_time"][c], 0.0)
        winner = position[ids[fold["best"]]]
        results[("outer", s, winner)] = FitResult(("outer", s, winner), *fold["outer"], problems=fold["problems"])
        choices.append(([winner], winner))
    space = Space({family: search.estimator}, candidates)
    return Assessment(build_payload(
        name=name or "nested cross-validation", dataset=dataset, space=space, layout=layout, y=y,
        metrics=metrics, classes=classes, classifier=classifier, results=_complete(results, layout, space,
                                                                                   metrics),
        choices=choices, refit_all=False, n_features=getattr(X, "shape", (0, None))[1],
        grouped=groups is not None, selected_by="search"))  # the search's own rule chose the winners


def _complete(results, layout, space, metrics) -> dict:
    """Configurations a fold's search never tried get NaN inner scores there, so every fold has them all."""
    for s in range(len(layout.splits)):
        for i in range(layout.n_inner_folds):
            for c in range(len(space.candidates)):
                key = ("inner", s, i, c)
                results.setdefault(key, FitResult(key, dict.fromkeys(metrics, np.nan), 0.0, 0.0, 0.0,
                                                  error="not evaluated by the search in this outer fold"))
    return results


def _fit_search(search, X, y, groups, train, test, scorer, metrics, classes, keep_predictions, searched):
    started_cpu = time.process_time()
    fitted = clone(search)
    fit_args = {} if groups is None else {"groups": _safe_indexing(groups, train)}
    with warnings.catch_warnings():  # as in lay_out: a search whose cv ignores groups splits ungrouped
        warnings.filterwarnings("ignore", "The groups parameter is ignored", UserWarning)
        fitted.fit(_safe_indexing(X, train), _safe_indexing(y, train), **fit_args)
    cv = fitted.cv_results_
    n_splits = fitted.n_splits_

    def column(metric, i):
        if searched is None:
            key = f"split{i}_test_{metric}"
        else:
            key = f"split{i}_test_score" if metric == searched else None
        return np.asarray(cv[key], dtype=float) if key in cv else np.full(len(cv["params"]), np.nan)

    inner = {metric: np.column_stack([column(metric, i) for i in range(n_splits)]).tolist() for metric in metrics}
    X_test, y_test = _safe_indexing(X, test), _safe_indexing(y, test)
    model, error = fitted.best_estimator_, None
    started = time.perf_counter()
    problems = []
    try:
        scores, problems = scorer.score(model, X_test, y_test, {})  # a failing metric alone is NaN
        prediction = outer_predictions(model, X_test, classes) if keep_predictions else None
    except Exception as exc:  # recorded like any failed fit
        scores, prediction = dict.fromkeys(metrics, np.nan), None
        error = "".join(traceback.format_exception_only(exc)).strip()
    score_time = time.perf_counter() - started
    return {"params": cv["params"], "inner": inner, "best": int(fitted.best_index_),
            "fit_time": np.asarray(cv["mean_fit_time"], dtype=float).tolist(),
            "score_time": np.asarray(cv["mean_score_time"], dtype=float).tolist(),
            "outer": (scores, float(fitted.refit_time_), score_time, time.process_time() - started_cpu,
                      prediction, error), "problems": tuple(problems)}
