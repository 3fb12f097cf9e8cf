"""Record a nested cross-validation that foldwise did not run (a deep-learning loop, another language).

    rec = Recorder("cnn on scans", task="classification", metrics=["roc_auc"], n_samples=len(y))
    for r, o, train, test in my_outer_splits:
        rec.outer_fold(r, o, n_train=len(train), test=test, y_true=y[test])
        for i, ... in my_inner_splits:
            rec.inner(r, o, i, family="cnn", params={"lr": 1e-3}, scores={"roc_auc": 0.91}, fit_time=12.5)
        rec.outer(r, o, family="cnn", params={"lr": 1e-3}, scores={"roc_auc": 0.89}, predictions=proba)
    assessment = rec.finish()   # fold winners by the selection rule; then .save() or .push()
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from foldwise.assessment import Assessment
from foldwise.payload import (
    AssessmentPayload,
    Configuration,
    Design,
    Failure,
    Family,
    InnerScores,
    OuterFold,
    OuterScores,
    Prediction,
    canonical_params,
    config_id,
)
from foldwise.runner.building import package_versions
from foldwise.runner.canonical import cut_short, digest, label_with_digest


class Recorder:
    def __init__(self, name: str, *, task: str, metrics: list[str], n_samples: int, dataset: str | None = None,
                 classes: list | None = None, prediction_kind: str = "proba"):
        self.name, self.dataset, self.task = name, dataset, task
        self.metrics, self.n_samples, self.classes = list(metrics), n_samples, classes
        self.prediction_kind = prediction_kind
        self._folds: dict[tuple[int, int], OuterFold] = {}
        self._configs: dict[str, Configuration] = {}
        self._inner: dict[tuple, tuple[list[float], float, float]] = {}
        self._outer: dict[tuple, tuple[list[float], float, float]] = {}
        self._predictions: list[Prediction] = []
        self._failures: list[Failure] = []

    def outer_fold(self, repeat: int, outer_fold: int, *, n_train: int, test, y_true=None) -> None:
        test = np.asarray(test).tolist()
        labels = None if y_true is None else np.asarray(y_true).tolist()
        repeat, outer_fold = int(repeat), int(outer_fold)  # numpy integers too: the payload takes plain ones
        self._folds[(repeat, outer_fold)] = OuterFold(repeat=repeat, outer_fold=outer_fold, n_train=int(n_train),
                                                      test_indices=test, y_true=labels)

    def inner(self, repeat: int, outer_fold: int, inner_fold: int, *, family: str, params: dict[str, Any],
              scores: dict[str, float | None], fit_time: float | None = None, score_time: float | None = None,
              error: str | None = None) -> None:
        c = self._config(family, params)
        repeat, outer_fold, inner_fold = int(repeat), int(outer_fold), int(inner_fold)
        self._inner[(repeat, outer_fold, inner_fold, c)] = (self._scores(scores), _time(fit_time), _time(score_time))
        if error:
            self._failures.append(Failure(level="inner", repeat=repeat, outer_fold=outer_fold,
                                          inner_fold=inner_fold, config=c, message=error))

    def outer(self, repeat: int, outer_fold: int, *, family: str, params: dict[str, Any],
              scores: dict[str, float | None], fit_time: float | None = None, score_time: float | None = None,
              predictions=None, error: str | None = None) -> None:
        c = self._config(family, params)
        repeat, outer_fold = int(repeat), int(outer_fold)
        self._outer[(repeat, outer_fold, c)] = (self._scores(scores), _time(fit_time), _time(score_time))
        if predictions is not None:
            self._predictions.append(Prediction.from_array(predictions, repeat=repeat, outer_fold=outer_fold,
                                                           config=c, kind=self.prediction_kind))
        if error:
            self._failures.append(Failure(level="outer", repeat=repeat, outer_fold=outer_fold, config=c,
                                          message=error))

    def finish(self) -> Assessment:
        """Build the assessment; its fold winners are computed from the recorded inner scores by the selection
        rule (``foldwise.definitions.select_in_fold``), as the payload does for any push that leaves them out."""
        if not self._folds or not self._inner:
            raise ValueError(f"nothing to finish: {len(self._folds)} outer folds and {len(self._inner)} inner "
                             f"scores recorded; call outer_fold(...) and inner(...) first")
        configs = list(self._configs.values())
        n_inner = 1 + max(key[2] for key in self._inner)
        design = Design(task=self.task, n_samples=self.n_samples, n_repeats=1 + max(r for r, _ in self._folds),
                        n_outer_folds=1 + max(o for _, o in self._folds), n_inner_folds=n_inner,
                        outer_splitter="recorded by hand", inner_splitter="recorded by hand",
                        refit_all=len(self._outer) == len(self._folds) * len(configs), metrics=self.metrics,
                        classes=self.classes)
        return Assessment(AssessmentPayload(
            name=self.name, dataset=self.dataset, design=design,
            families=[Family(name=family) for family in dict.fromkeys(config.family for config in configs)],
            configurations=configs, outer_folds=[self._folds[key] for key in sorted(self._folds)],
            inner_scores=InnerScores(**_columns(self._inner, inner=True)),
            outer_scores=OuterScores(**_columns(self._outer, inner=False)),
            predictions=self._predictions, failures=self._failures, versions=package_versions(),
            total_fit_time=float(sum(fit_time for _, fit_time, _ in [*self._inner.values(), *self._outer.values()]
                                     if not math.isnan(fit_time)))))

    def _config(self, family: str, params: dict[str, Any]) -> int:
        key = digest(family, params)  # one configuration per description (foldwise.runner.canonical)
        if key not in self._configs:
            label = config_id(family, params)
            taken = any(config.id == label for config in self._configs.values())
            ident = label_with_digest(label, key) if taken or cut_short(params) else label
            self._configs[key] = Configuration(id=ident, family=family, params=canonical_params(params))
        return list(self._configs).index(key)

    def _scores(self, scores: dict[str, float | None]) -> list[float]:
        unknown = sorted(set(scores) - set(self.metrics))
        if unknown:
            raise ValueError(f"scores for metrics {unknown} that the recorder was not told of {self.metrics}")
        values = [scores.get(metric) for metric in self.metrics]
        return [math.nan if value is None or not math.isfinite(value) else float(value) for value in values]


def _time(seconds: float | None) -> float:
    return math.nan if seconds is None else float(seconds)


def _columns(entries: dict, *, inner: bool) -> dict[str, np.ndarray]:
    names = ["repeat", "outer_fold", "inner_fold", "config"] if inner else ["repeat", "outer_fold", "config"]
    columns = {name: [] for name in [*names, "metric", "score", "fit_time", "score_time"]}
    for key in sorted(entries):
        scores, fit_time, score_time = entries[key]
        for metric, score in enumerate(scores):
            for name, value in zip(names, key, strict=True):
                columns[name].append(value)
            columns["metric"].append(metric)
            columns["score"].append(score)
            columns["fit_time"].append(fit_time)
            columns["score_time"].append(score_time)
    # float64 scores and times with NaN for a failed fit or a time not given, int64 positions
    return {name: np.array(values, dtype=np.float64 if name in ("score", "fit_time", "score_time") else np.int64)
            for name, values in columns.items()}
