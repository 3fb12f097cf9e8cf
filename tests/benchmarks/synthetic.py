"""A large assessment made of invented numbers, for the store's and the pages' benchmarks.

Nothing here was fitted: the scores, times and predictions are draws from a seeded numpy generator,
shaped like a regression assessed with repeated nested cross-validation (one float64 prediction per
test row, so an ensemble of configurations is the mean of theirs). Each configuration
has an invented true quality; its inner and outer scores scatter around it fold by fold, and the fold
winners are picked from the invented inner scores by the runner's rule (best mean inner score on the
first metric, first in order on ties), so the stored winners agree with the stored inner scores.
"""

from __future__ import annotations

from dataclasses import dataclass
from uuid import uuid4

import numpy as np

from foldwise.payload import (
    AssessmentPayload,
    Configuration,
    Design,
    Family,
    FoldChoice,
    InnerScores,
    OuterFold,
    OuterScores,
    Prediction,
    config_id,
)

METRICS = ["r2", "neg_mean_absolute_error"]
FAMILIES = ("ridge", "stumps", "nearest")  # invented family names; no estimator was ever fitted


@dataclass(frozen=True)
class Size:
    n_repeats: int
    n_outer: int
    n_inner: int
    n_configs: int
    n_samples: int

    @property
    def n_inner_rows(self) -> int:
        return self.n_repeats * self.n_outer * self.n_inner * self.n_configs * len(METRICS)

    @property
    def n_outer_rows(self) -> int:
        return self.n_repeats * self.n_outer * self.n_configs * len(METRICS)

    def __str__(self) -> str:
        return (f"{self.n_repeats} repeats × {self.n_outer} outer × {self.n_inner} inner × {self.n_configs} "
                f"configurations × {len(METRICS)} metrics, {self.n_samples} samples")


FULL = Size(n_repeats=10, n_outer=10, n_inner=10, n_configs=300, n_samples=5_000)
TENTH = Size(n_repeats=10, n_outer=10, n_inner=10, n_configs=30, n_samples=5_000)
HUNDREDTH = Size(n_repeats=1, n_outer=10, n_inner=10, n_configs=30, n_samples=5_000)


def synthetic_payload(size: Size, *, seed: int = 0) -> AssessmentPayload:
    """An assessment of ``size`` with every configuration refit on every outer fold and its outer-test
    predictions (float64, one column) kept."""
    rng = np.random.default_rng(seed)
    n_repeats, n_outer, n_inner, n_configs = size.n_repeats, size.n_outer, size.n_inner, size.n_configs
    families = [FAMILIES[c % len(FAMILIES)] for c in range(n_configs)]
    configurations = []
    for c, family in enumerate(families):
        params = {"level": c // len(FAMILIES), "shrink": round(0.01 * (1 + c % 7), 2)}
        configurations.append(Configuration(id=config_id(family, params), family=family, params=params))

    quality = rng.uniform(0.45, 0.80, n_configs)  # an invented true r2 per configuration
    centre = np.stack([quality, -(1.2 - quality)], axis=-1)  # and a mean absolute error that falls with it
    inner = centre[None, None, None] + rng.normal(0, 0.03, (n_repeats, n_outer, n_inner, n_configs, 2))
    outer = centre[None, None] - 0.01 + rng.normal(0, 0.04, (n_repeats, n_outer, n_configs, 2))
    inner_fit = rng.lognormal(-3.0, 0.5, (n_repeats, n_outer, n_inner, n_configs))
    outer_fit = rng.lognormal(-2.9, 0.5, (n_repeats, n_outer, n_configs))

    y = rng.normal(0, 1, size.n_samples)
    folds = []
    for r in range(n_repeats):
        for o, test in enumerate(np.array_split(rng.permutation(size.n_samples), n_outer)):
            folds.append(OuterFold(repeat=r, outer_fold=o, n_train=size.n_samples - len(test),
                                   test_indices=test.tolist(), y_true=y[test].tolist()))

    family_winners, overall_winners = _winners(inner[..., 0].mean(axis=2), families)
    predictions = []
    for fold in folds:
        targets = np.asarray(fold.y_true)
        for c in range(n_configs):
            values = quality[c] * targets + rng.normal(0, np.sqrt(1 - quality[c]), len(targets))
            predictions.append(Prediction.from_array(values, repeat=fold.repeat, outer_fold=fold.outer_fold,
                                                     config=c, kind="predict"))
    return AssessmentPayload(
        uuid=uuid4(), name=f"invented scores, {size}", dataset="invented (seeded numpy draws)",
        design=Design(task="regression", n_samples=size.n_samples, n_features=20, n_repeats=n_repeats,
                      n_outer_folds=n_outer, n_inner_folds=n_inner, metrics=METRICS,
                      outer_splitter=f"RepeatedKFold(n_splits={n_outer}, n_repeats={n_repeats})",
                      inner_splitter=f"KFold(n_splits={n_inner})"),
        families=[Family(name=name) for name in dict.fromkeys(families)],
        configurations=configurations, outer_folds=folds,
        inner_scores=InnerScores(**_columns(inner, inner_fit, ("repeat", "outer_fold", "inner_fold",
                                                               "config"))),
        outer_scores=OuterScores(**_columns(outer, outer_fit, ("repeat", "outer_fold", "config"))),
        family_winners=family_winners, overall_winners=overall_winners, predictions=predictions,
        seeds={"invented": seed}, total_fit_time=float(inner_fit.sum() + outer_fit.sum()))


def _columns(scores: np.ndarray, fit_time: np.ndarray, names: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Score rows in the runner's order (folds, then configuration, then metric), as payload columns: arrays,
    as the runner hands them over."""
    keys = np.indices(scores.shape).reshape(scores.ndim, -1)
    columns = {name: keys[axis] for axis, name in enumerate(names)}
    columns["metric"] = keys[-1]
    columns["score"] = scores.ravel()
    times = np.repeat(fit_time.ravel(), scores.shape[-1])
    columns["fit_time"] = times
    columns["score_time"] = times / 20
    return columns


def _winners(means: np.ndarray, families: list[str]) -> tuple[list[FoldChoice], list[FoldChoice]]:
    """Per (repeat, outer fold): each family's best mean inner score (first on ties), then the best one."""
    family_winners, overall_winners = [], []
    positions = {name: [c for c, family in enumerate(families) if family == name]
                 for name in dict.fromkeys(families)}
    for r, o in np.ndindex(means.shape[:2]):
        winners = [members[int(np.argmax(means[r, o, members]))] for members in positions.values()]
        family_winners += [FoldChoice(repeat=r, outer_fold=o, config=c) for c in winners]
        overall = winners[int(np.argmax(means[r, o, winners]))]
        overall_winners.append(FoldChoice(repeat=r, outer_fold=o, config=overall))
    return family_winners, overall_winners
