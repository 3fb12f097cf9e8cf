"""The one description of an assessment: what the runner builds, the client sends and the store keeps.

Scores travel as columns (one list per field) with configurations and metrics referred to by their
position, so an assessment of hundreds of thousands of inner scores stays a compact JSON document.
Outer-test predictions travel as base64 of little-endian float64, one block per (outer fold,
configuration). Estimators travel as base64 of skops files (``skops.io.dumps``), which a loader can
refuse type by type.
"""

from __future__ import annotations

import base64
import hashlib
import json
import math
from datetime import UTC, datetime
from typing import Any, Literal
from uuid import UUID, uuid4

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

SCHEMA_VERSION = 1

Label = bool | int | float | str


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Family(_Strict):
    """A model family: one estimator whose parameters the configurations vary."""

    name: str = Field(min_length=1, max_length=200)
    estimator: str = Field(default="", max_length=20_000, description="repr of the unfitted estimator")
    estimator_class: str = Field(default="", max_length=500, description="import path of its class")
    estimator_skops: str | None = Field(default=None, description="base64 of skops.io.dumps of the unfitted "
                                                                   "estimator, as the runner saw it")


class Configuration(_Strict):
    """One point of a family's grid."""

    id: str = Field(min_length=1, max_length=2_000, description="stable id: family plus canonical params")
    family: str = Field(min_length=1, max_length=200)
    params: dict[str, Any] = Field(default_factory=dict)


class Design(_Strict):
    """How the nested cross-validation was laid out."""

    task: Literal["classification", "regression"]
    n_samples: int = Field(ge=1)
    n_features: int | None = Field(default=None, ge=0)
    n_repeats: int = Field(ge=1)
    n_outer_folds: int = Field(ge=1, description="outer folds per repeat")
    n_inner_folds: int = Field(ge=1)
    outer_splitter: str = Field(default="", max_length=2_000)
    inner_splitter: str = Field(default="", max_length=2_000)
    grouped: bool = False
    refit_all: bool = Field(default=True, description="every configuration refit on every outer fold")
    metrics: list[str] = Field(min_length=1, description="scorer names; the first one selects")
    classes: list[Label] | None = None

    @property
    def selection_metric(self) -> str:
        return self.metrics[0]


class OuterFold(_Strict):
    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    n_train: int = Field(ge=1)
    test_indices: list[int] = Field(min_length=1, description="row positions in the data set")
    y_true: list[Label] | None = Field(default=None, description="true targets of the test rows")


class _ScoreColumns(_Strict):
    repeat: list[int]
    outer_fold: list[int]
    config: list[int] = Field(description="position in `configurations`")
    metric: list[int] = Field(description="position in `design.metrics`")
    score: list[float | None] = Field(description="null for a failed fit")
    fit_time: list[float | None]
    score_time: list[float | None]

    def __len__(self) -> int:
        return len(self.score)

    @model_validator(mode="after")
    def _same_lengths(self):
        lengths = {name: len(getattr(self, name)) for name in type(self).model_fields}
        if len(set(lengths.values())) > 1:
            raise ValueError(f"columns differ in length: {lengths}")
        for name in ("score", "fit_time", "score_time"):
            for position, value in enumerate(getattr(self, name)):
                if value is not None and not math.isfinite(value):
                    raise ValueError(f"{name}[{position}] is {value}; use null for a failed fit")
        return self


class InnerScores(_ScoreColumns):
    inner_fold: list[int]


class OuterScores(_ScoreColumns):
    pass


class FoldChoice(_Strict):
    """The configuration chosen in one outer fold of one repeat."""

    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    config: int = Field(ge=0, description="position in `configurations`")


class Prediction(_Strict):
    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    config: int = Field(ge=0)
    kind: Literal["proba", "decision", "predict"]
    n_columns: int = Field(ge=1)
    data: str = Field(description="base64 of little-endian float64, row-major (n_test, n_columns)")

    def array(self) -> np.ndarray:
        values = np.frombuffer(base64.b64decode(self.data), dtype="<f8")
        return values.reshape(-1, self.n_columns)

    @classmethod
    def from_array(cls, values: np.ndarray, **fields) -> Prediction:
        values = np.asarray(values, dtype="<f8")
        if values.ndim == 1:
            values = values[:, None]
        data = base64.b64encode(np.ascontiguousarray(values).tobytes()).decode("ascii")
        return cls(n_columns=values.shape[1], data=data, **fields)


class FittedModel(_Strict):
    """A fold winner as fitted on its outer training set (kept when the run asked for it)."""

    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    config: int = Field(ge=0)
    skops: str = Field(min_length=1, description="base64 of skops.io.dumps of the fitted estimator")


class Failure(_Strict):
    level: Literal["inner", "outer"]
    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    inner_fold: int | None = Field(default=None, ge=0)
    config: int = Field(ge=0)
    message: str = Field(max_length=20_000)


class AssessmentPayload(_Strict):
    """A complete nested cross-validation, as pushed to `POST /api/assessments`."""

    schema_version: Literal[1] = SCHEMA_VERSION
    uuid: UUID = Field(default_factory=uuid4)
    name: str = Field(min_length=1, max_length=200)
    dataset: str | None = Field(default=None, max_length=200)
    created_at: datetime = Field(default_factory=lambda: datetime.now(UTC))
    design: Design
    families: list[Family] = Field(min_length=1)
    configurations: list[Configuration] = Field(min_length=1)
    outer_folds: list[OuterFold] = Field(min_length=1)
    inner_scores: InnerScores
    outer_scores: OuterScores
    family_winners: list[FoldChoice]
    overall_winners: list[FoldChoice]
    predictions: list[Prediction] = Field(default_factory=list)
    failures: list[Failure] = Field(default_factory=list)
    models: list[FittedModel] = Field(default_factory=list, description="fitted family winners, if kept")
    versions: dict[str, str] = Field(default_factory=dict)
    seeds: dict[str, Any] = Field(default_factory=dict)
    total_fit_time: float = Field(default=0.0, ge=0)

    @model_validator(mode="after")
    def _consistent(self):
        _check_consistency(self)
        return self

    def fingerprint(self) -> str:
        return outer_fingerprint(self.design.n_samples, self.outer_folds)


def outer_fingerprint(n_samples: int, folds: list[OuterFold]) -> str:
    """Hash of the outer fold assignment: equal for two assessments exactly when they can be paired."""
    ordered = sorted(folds, key=lambda fold: (fold.repeat, fold.outer_fold))
    text = json.dumps([n_samples] + [[f.repeat, f.outer_fold, sorted(f.test_indices)] for f in ordered])
    return hashlib.sha256(text.encode()).hexdigest()[:32]


def canonical_params(params: dict[str, Any]) -> dict[str, Any]:
    """Parameters with sorted keys and JSON-safe values (estimators and callables by their repr)."""
    return {key: _json_safe(params[key]) for key in sorted(params)}


def config_id(family: str, params: dict[str, Any]) -> str:
    return f"{family}:{json.dumps(canonical_params(params), sort_keys=True, separators=(',', ':'))}"


def _json_safe(value: Any) -> Any:
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        value = float(value)
        return value if math.isfinite(value) else repr(value)
    if isinstance(value, list | tuple):
        return [_json_safe(item) for item in value]
    if isinstance(value, dict):
        return {str(key): _json_safe(value[key]) for key in sorted(value, key=str)}
    return repr(value)


def _check_consistency(payload: AssessmentPayload) -> None:
    """Refuse references that point nowhere, naming the JSON path of the first problem."""
    design = payload.design
    n_configs, n_metrics = len(payload.configurations), len(design.metrics)
    family_names = [family.name for family in payload.families]
    _refuse_duplicates("families", family_names)
    _refuse_duplicates("configurations", [config.id for config in payload.configurations])
    _refuse_duplicates("design.metrics", design.metrics)
    for position, config in enumerate(payload.configurations):
        if config.family not in family_names:
            raise ValueError(f"configurations[{position}].family: {config.family!r} is not in families")

    folds = {}
    for position, fold in enumerate(payload.outer_folds):
        key = (fold.repeat, fold.outer_fold)
        where = f"outer_folds[{position}]"
        if fold.repeat >= design.n_repeats or fold.outer_fold >= design.n_outer_folds:
            raise ValueError(f"{where}: repeat {fold.repeat}, outer fold {fold.outer_fold} lies outside "
                             f"the design ({design.n_repeats} repeats × {design.n_outer_folds} outer folds)")
        if key in folds:
            raise ValueError(f"{where}: repeat {fold.repeat}, outer fold {fold.outer_fold} appears twice")
        if min(fold.test_indices) < 0 or max(fold.test_indices) >= design.n_samples:
            raise ValueError(f"{where}.test_indices: indices must lie in 0..{design.n_samples - 1}")
        if fold.y_true is not None and len(fold.y_true) != len(fold.test_indices):
            raise ValueError(f"{where}.y_true: {len(fold.y_true)} values for "
                             f"{len(fold.test_indices)} test rows")
        folds[key] = fold

    for name in ("inner_scores", "outer_scores"):
        _check_columns(name, getattr(payload, name), folds, n_configs, n_metrics, design.n_inner_folds)

    for name in ("family_winners", "overall_winners"):
        for position, choice in enumerate(getattr(payload, name)):
            _check_reference(f"{name}[{position}]", choice, folds, n_configs)

    for position, prediction in enumerate(payload.predictions):
        where = f"predictions[{position}]"
        _check_reference(where, prediction, folds, n_configs)
        size = len(base64.b64decode(prediction.data, validate=False)) if prediction.data else 0
        expected = len(folds[(prediction.repeat, prediction.outer_fold)].test_indices) * prediction.n_columns
        if size != expected * 8:
            raise ValueError(f"{where}.data: holds {size // 8} float64 values, expected {expected} "
                             f"(test rows × n_columns)")

    for position, failure in enumerate(payload.failures):
        _check_reference(f"failures[{position}]", failure, folds, n_configs)

    for position, family in enumerate(payload.families):
        if family.estimator_skops is not None:
            _check_base64(f"families[{position}].estimator_skops", family.estimator_skops)
    kept = set()
    for position, model in enumerate(payload.models):
        where = f"models[{position}]"
        _check_reference(where, model, folds, n_configs)
        _check_base64(f"{where}.skops", model.skops)
        if (model.repeat, model.outer_fold, model.config) in kept:
            raise ValueError(f"{where}: repeat {model.repeat}, outer fold {model.outer_fold}, config "
                             f"{model.config} appears twice")
        kept.add((model.repeat, model.outer_fold, model.config))


def _refuse_duplicates(where: str, names: list[str]) -> None:
    seen = set()
    for position, name in enumerate(names):
        if name in seen:
            raise ValueError(f"{where}[{position}]: {name!r} appears twice")
        seen.add(name)


def _check_reference(where: str, item, folds: dict, n_configs: int) -> None:
    if (item.repeat, item.outer_fold) not in folds:
        raise ValueError(f"{where}: repeat {item.repeat}, outer fold {item.outer_fold} is not in outer_folds")
    if item.config >= n_configs:
        raise ValueError(f"{where}.config: {item.config} is out of range (0..{n_configs - 1})")


def _check_base64(where: str, text: str) -> None:
    try:
        base64.b64decode(text, validate=True)
    except ValueError:
        raise ValueError(f"{where}: not base64 text (received {text[:40]!r}...)") from None


def _check_columns(name, columns, folds, n_configs, n_metrics, n_inner_folds) -> None:
    for field, limit in (("config", n_configs), ("metric", n_metrics)):
        values = getattr(columns, field)
        for position, value in enumerate(values):
            if not 0 <= value < limit:
                raise ValueError(f"{name}.{field}[{position}]: {value} is out of range (0..{limit - 1})")
    for position, key in enumerate(zip(columns.repeat, columns.outer_fold, strict=True)):
        if key not in folds:
            raise ValueError(f"{name}.outer_fold[{position}]: repeat {key[0]}, outer fold {key[1]} "
                             f"is not in outer_folds")
    if isinstance(columns, InnerScores):
        for position, value in enumerate(columns.inner_fold):
            if not 0 <= value < n_inner_folds:
                raise ValueError(f"inner_scores.inner_fold[{position}]: {value} is out of range "
                                 f"(0..{n_inner_folds - 1})")
