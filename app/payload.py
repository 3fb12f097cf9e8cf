"""The one description of an assessment: what the runner builds, the client sends and the store keeps.

Scores travel as columns (one list per field) with configurations and metrics referred to by their
position, so an assessment of hundreds of thousands of inner scores stays a compact JSON document;
from schema version 2 a column may also travel packed (``foldwise.packed``), as the client sends it.
In Python every column is a read-only numpy array, float64 scores and times with NaN for a failed fit:
null is JSON's way of saying so, and only JSON's.
Outer-test predictions are little-endian float64, one block of bytes per (outer fold, configuration):
base64 text in JSON, raw bytes after the header of a packed body (``foldwise.wire``). Estimators
travel as base64 of skops files (``skops.io.dumps``), which a loader can refuse type by type.
"""

from __future__ import annotations

import base64
import hashlib
import json
import math
from datetime import UTC, datetime
from typing import Annotated, Any, Literal
from uuid import UUID, uuid4

import numpy as np
from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    FiniteFloat,
    TypeAdapter,
    field_validator,
    model_validator,
)

from foldwise.consistency import settle
from foldwise.packed import PACKED, TAIL, Blob, FloatColumn, IntColumn, TailWriter

SCHEMA_VERSION = 2  # 2 added packed score columns; a version 1 document is read as it always was

# The largest count an INTEGER column holds on every backend (PostgreSQL's is 32-bit).
MAX_COUNT = 2**31 - 1
# Parameters, seeds and versions are free-form JSON; deeper than this is a mistake, and costly to walk.
MAX_DEPTH = 32


def _storable_text(text: str) -> str:
    """Text that every backend stores and gives back: UTF-8 (no unpaired surrogate), without NUL."""
    position = text.find("\x00")
    if position >= 0:
        raise ValueError(f"holds a NUL character at position {position}, which no text column can store; "
                         "remove it")
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as error:
        raise ValueError(f"is not UTF-8 text: an unpaired surrogate at position {error.start}") from None
    return text


def _one_line(text: str) -> str:
    """A name shown in a table, a chart or a CSV cell: no control characters (a line break in a name would
    start a new row where a spreadsheet reads it, and a formula after it)."""
    for position, character in enumerate(text):
        if character < " " or character == "\x7f":
            raise ValueError(f"holds the control character {character!r} at position {position}; a name is "
                             "one line of text without control characters")
    return text


Text = Annotated[str, AfterValidator(_storable_text)]
Name = Annotated[str, AfterValidator(_storable_text), AfterValidator(_one_line)]
Label = bool | int | FiniteFloat | Text
MetricName = Annotated[str, Field(min_length=1), AfterValidator(_storable_text), AfterValidator(_one_line)]


class _Strict(BaseModel):
    # strict: a number is a JSON number (false is not 0, "0.8" is not 0.8), a count an integer
    model_config = ConfigDict(extra="forbid", strict=True)


class Family(_Strict):
    """A model family: one estimator whose parameters the configurations vary."""

    name: Name = Field(min_length=1, max_length=200)
    estimator: Text = Field(default="", max_length=20_000, description="repr of the unfitted estimator")
    estimator_class: Text = Field(default="", max_length=500, description="import path of its class")
    estimator_skops: str | None = Field(default=None, description="base64 of skops.io.dumps of the unfitted "
                                                                   "estimator, as the runner saw it")


class Configuration(_Strict):
    """One point of a family's grid."""

    id: Name = Field(min_length=1, max_length=2_000, description="stable id: family plus canonical params")
    family: Name = Field(min_length=1, max_length=200)
    params: dict[str, Any] = Field(default_factory=dict)


class Design(_Strict):
    """How the nested cross-validation was laid out."""

    task: Literal["classification", "regression"]
    n_samples: int = Field(ge=1, le=MAX_COUNT)
    n_features: int | None = Field(default=None, ge=0, le=MAX_COUNT)
    n_repeats: int = Field(ge=1, le=MAX_COUNT)
    n_outer_folds: int = Field(ge=1, le=MAX_COUNT, description="outer folds per repeat")
    n_inner_folds: int = Field(ge=1, le=MAX_COUNT)
    outer_splitter: str = Field(default="", max_length=2_000)
    inner_splitter: str = Field(default="", max_length=2_000)
    grouped: bool = False
    refit_all: bool = Field(default=True, description="every configuration refit on every outer fold")
    metrics: list[MetricName] = Field(min_length=1, description="scorer names, unique; the first one selects")
    selected_by: Literal["inner_mean", "search"] = Field(
        default="inner_mean", description="how the fold winners were chosen: 'inner_mean' by foldwise's "
        "selection rule (greatest inner mean on the first metric, the first in grid order on ties), so the "
        "server checks them against the inner scores and computes them when left out; 'search' by a search "
        "object's own rule (successive halving, a callable refit), taken as sent")
    scorers: dict[Text, Text] = Field(default_factory=dict, description="metric -> what it scored, for a "
                                      "metric whose name is not a scikit-learn scorer name (make_scorer(...))")
    classes: list[Label] | None = None
    trusted: list[Name] = Field(default_factory=list, max_length=100, description="libraries (top-level module "
                                "names) whose classes the loader trusts in this assessment's kept models, as "
                                "named by nested_cv(trusted=...); scikit-learn, numpy and the families' estimator "
                                "classes are trusted without it")

    @property
    def selection_metric(self) -> str:
        return self.metrics[0]


class OuterFold(_Strict):
    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    n_train: int = Field(ge=1, le=MAX_COUNT)
    test_indices: list[int] = Field(min_length=1, description="row positions in the data set")
    y_true: list[Label] | None = Field(default=None, description="true targets of the test rows")


_FLOAT_COLUMNS = ("score", "fit_time", "score_time")


class _Columns(_Strict):
    """Columns of equal length, each a read-only numpy array (``foldwise.packed``): int64 positions, float64
    scores and times with NaN for a failed fit."""

    def __len__(self) -> int:
        return len(self.score)

    def __eq__(self, other) -> bool:
        # Arrays compare element by element; two columns are equal when every value is, NaN where NaN.
        return type(other) is type(self) and all(
            np.array_equal(getattr(self, name), getattr(other, name), equal_nan=True)
            for name in type(self).model_fields)

    __hash__ = None

    @model_validator(mode="before")
    @classmethod
    def _null_for_failed(cls, data: Any) -> Any:
        """A list says "failed" with null alone: NaN or an infinity there is refused, at the block's path."""
        if not isinstance(data, dict):
            return data
        for name in _FLOAT_COLUMNS:
            values = data.get(name)
            if not isinstance(values, list):
                continue
            try:
                numbers = np.array(values, dtype=np.float64)  # null becomes NaN
            except (TypeError, ValueError, OverflowError):
                continue  # not numbers (or an integer past any float): refused by the column, row by row
            if numbers.ndim != 1:
                continue  # lists in a column: refused there too
            for position in np.flatnonzero(~np.isfinite(numbers)).tolist():
                if isinstance(values[position], float):  # text or null: the column's own business
                    raise ValueError(f"{name}[{position}] is {values[position]}; use null for a failed fit")
        return data

    @model_validator(mode="after")
    def _same_lengths(self):
        lengths = {name: len(getattr(self, name)) for name in type(self).model_fields}
        if len(set(lengths.values())) > 1:
            raise ValueError(f"columns differ in length: {lengths}")
        return self


class _ScoreColumns(_Columns):
    repeat: IntColumn
    outer_fold: IntColumn
    config: IntColumn = Field(description="position in `configurations`")
    metric: IntColumn = Field(description="position in `design.metrics`")
    score: FloatColumn = Field(description="null for a failed fit")
    fit_time: FloatColumn
    score_time: FloatColumn


class InnerScores(_ScoreColumns):
    inner_fold: IntColumn


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
    data: Blob = Field(description="little-endian float64, row-major (n_test, n_columns); in JSON as "
                                   "base64 text")

    def array(self) -> np.ndarray:
        return np.frombuffer(self.data, dtype="<f8").reshape(-1, self.n_columns)

    @classmethod
    def from_array(cls, values: np.ndarray, **fields) -> Prediction:
        values = np.asarray(values, dtype="<f8")
        if values.ndim == 1:
            values = values[:, None]
        return cls(n_columns=values.shape[1], data=np.ascontiguousarray(values).tobytes(), **fields)


class FittedModel(_Strict):
    """A fold winner as fitted on its outer training set (kept when the run asked for it)."""

    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    config: int = Field(ge=0)
    skops: str = Field(min_length=1, description="base64 of skops.io.dumps of the fitted estimator")


class FinalScores(_Columns):
    """The final selection's inner scores: one row per inner fold, configuration and metric."""

    inner_fold: IntColumn
    config: IntColumn = Field(description="position in `configurations`")
    metric: IntColumn = Field(description="position in `design.metrics`")
    score: FloatColumn = Field(description="null for a failed fit")
    fit_time: FloatColumn
    score_time: FloatColumn


class FinalSelection(_Strict):
    """The selection procedure applied to every row: the inner splitter over all rows, the winner chosen by
    the rule of the outer folds and refit on all rows. The model the nested estimate describes."""

    n_inner_folds: int = Field(ge=1, le=MAX_COUNT)
    inner_splitter: str = Field(default="", max_length=2_000)
    inner_scores: FinalScores
    family_winners: list[int] = Field(default_factory=list, description="positions in `configurations`")
    config: int | None = Field(default=None, ge=0, description="the chosen configuration; null when every "
                                                               "configuration failed")
    refit_time: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    refit_error: Text | None = Field(default=None, max_length=10_000)
    model_skops: str | None = Field(default=None, description="base64 of skops.io.dumps of the chosen "
                                                              "configuration refit on every row")


class Failure(_Strict):
    """A failed fit, or the part of a fit that failed: one metric's scoring, or its outer predictions."""

    level: Literal["inner", "outer"]
    repeat: int = Field(ge=0)
    outer_fold: int = Field(ge=0)
    inner_fold: int | None = Field(default=None, ge=0)
    config: int = Field(ge=0)
    metric: int | None = Field(default=None, ge=0, description="position in `design.metrics` of the one "
                               "metric whose scoring failed; null when the whole fit failed")
    stage: Literal["fit", "score", "predict"] | None = Field(
        default=None, description="what failed: the fit (every metric NaN), one metric's scoring, or the "
                                  "outer-test predictions; null in assessments recorded before stages were kept")
    message: Text = Field(max_length=20_000)


class AssessmentPayload(_Strict):
    """A complete nested cross-validation, as pushed to `POST /api/assessments`."""

    schema_version: Literal[1, 2] = SCHEMA_VERSION
    uuid: UUID = Field(default_factory=uuid4, strict=False, description="the assessment's identity: pushing "
                       "it again with the same content is answered 200, with other content 409")
    name: Name = Field(min_length=1, max_length=200)
    dataset: Name | None = Field(default=None, max_length=200)
    created_at: datetime = Field(default_factory=lambda: datetime.now(UTC), strict=False)
    design: Design
    families: list[Family] = Field(min_length=1)
    configurations: list[Configuration] = Field(min_length=1)
    outer_folds: list[OuterFold] = Field(min_length=1)
    inner_scores: InnerScores
    outer_scores: OuterScores
    family_winners: list[FoldChoice] | None = Field(
        default=None, description="each family's winner per outer fold; left out (or null), computed from the "
        "inner scores by the selection rule; sent, it must be the one the rule chooses (see design.selected_by)")
    overall_winners: list[FoldChoice] | None = Field(
        default=None, description="the winner per outer fold, none where every configuration failed; left out "
        "(or null), computed from the inner scores like family_winners")
    predictions: list[Prediction] = Field(default_factory=list)
    failures: list[Failure] = Field(default_factory=list)
    models: list[FittedModel] = Field(default_factory=list, description="fitted family winners, if kept")
    final: FinalSelection | None = Field(default=None, description="the final selection on every row, if run")
    versions: dict[str, str] = Field(default_factory=dict)
    seeds: dict[str, Any] = Field(default_factory=dict)
    total_fit_time: float = Field(default=0.0, ge=0, allow_inf_nan=False)

    @field_validator("created_at")
    @classmethod
    def _has_utc_time(cls, value: datetime) -> datetime:
        # The store keeps UTC wall time; near year 1 or 9999 an offset can shift a time off the calendar.
        if value.utcoffset() is not None:
            try:
                value.astimezone(UTC)
            except OverflowError:
                raise ValueError(f"{value.isoformat()} lies outside the years 1..9999 once taken to UTC; "
                                 "send a time between them") from None
        return value

    @model_validator(mode="after")
    def _consistent(self):
        _check_consistency(self)
        settle(self)  # the rules of an assessment that agrees with itself; fills in winners left out
        return self

    def recheck(self) -> None:
        """Run the consistency checks again on the fields as they are now, for a payload changed since it was
        validated (``save`` does, before storing): the same refusals as a push would get."""
        for name in ("inner_scores", "outer_scores"):  # columns assigned since are read as arrays again
            block = getattr(self, name)
            setattr(self, name, type(block).model_validate(dict(block)))
        _check_consistency(self)
        settle(self)

    def fingerprint(self) -> str:
        return outer_fingerprint(self.design.n_samples, self.outer_folds)

    def packed_json(self, *, tail: TailWriter | None = None) -> bytes:
        """The UTF-8 JSON document with its score columns packed; with ``tail``, the header of a packed body
        (``foldwise.wire``), each prediction block handed to ``tail`` and referred to by its place there."""
        context = PACKED if tail is None else PACKED | {TAIL: tail}
        return _PAYLOAD.dump_json(self, context=context)  # bytes at once: no copy of a large str to encode


_PAYLOAD = TypeAdapter(AssessmentPayload)


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
    strangers = sorted(set(design.scorers) - set(design.metrics))
    if strangers:
        raise ValueError(f"design.scorers: describes {strangers}, which design.metrics does not name")
    for position, config in enumerate(payload.configurations):
        if config.family not in family_names:
            raise ValueError(f"configurations[{position}].family: {config.family!r} is not in families")
        _check_plain_json(f"configurations[{position}].params", config.params)
    _check_plain_json("seeds", payload.seeds)
    _check_plain_json("versions", payload.versions)

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
            raise ValueError(f"{where}.test_indices: indices must lie in 0..{design.n_samples - 1} "
                             f"(design.n_samples is {design.n_samples})")
        if fold.y_true is not None and len(fold.y_true) != len(fold.test_indices):
            raise ValueError(f"{where}.y_true: {len(fold.y_true)} values for "
                             f"{len(fold.test_indices)} test rows")
        folds[key] = fold

    for name in ("inner_scores", "outer_scores"):
        _check_columns(name, getattr(payload, name), folds, n_configs, n_metrics, design.n_inner_folds)

    for name in ("family_winners", "overall_winners"):
        for position, choice in enumerate(getattr(payload, name) or []):
            _check_reference(f"{name}[{position}]", choice, folds, n_configs)

    for position, prediction in enumerate(payload.predictions):
        where = f"predictions[{position}]"
        _check_reference(where, prediction, folds, n_configs)
        size = len(prediction.data)
        n_test = len(folds[(prediction.repeat, prediction.outer_fold)].test_indices)
        if size != n_test * prediction.n_columns * 8:
            raise ValueError(f"{where}.data: holds {size // 8} float64 values, expected "
                             f"{n_test * prediction.n_columns}: {n_test} test rows (its fold in outer_folds) × "
                             f"n_columns {prediction.n_columns}")

    for position, failure in enumerate(payload.failures):
        _check_reference(f"failures[{position}]", failure, folds, n_configs)
        if failure.inner_fold is not None and failure.inner_fold >= design.n_inner_folds:
            raise ValueError(f"failures[{position}].inner_fold: {failure.inner_fold} is out of range of "
                             f"design.n_inner_folds (0..{design.n_inner_folds - 1})")
        if failure.metric is not None and failure.metric >= n_metrics:
            raise ValueError(f"failures[{position}].metric: {failure.metric} is not a position in design.metrics "
                             f"(0..{n_metrics - 1})")
        if failure.metric is not None and failure.stage not in (None, "score"):
            raise ValueError(f"failures[{position}].metric: a {failure.stage!r} failure fails every metric, so "
                             f"metric must be null; give stage 'score' for one metric's failure")

    for position, family in enumerate(payload.families):
        if family.estimator_skops is not None:
            _check_base64(f"families[{position}].estimator_skops", family.estimator_skops)
    if payload.final is not None:
        _check_final(payload.final, n_configs, n_metrics)
    kept = set()
    for position, model in enumerate(payload.models):
        where = f"models[{position}]"
        _check_reference(where, model, folds, n_configs)
        _check_base64(f"{where}.skops", model.skops)
        if (model.repeat, model.outer_fold, model.config) in kept:
            raise ValueError(f"{where}: repeat {model.repeat}, outer fold {model.outer_fold}, config "
                             f"{model.config} appears twice")
        kept.add((model.repeat, model.outer_fold, model.config))


def _check_final(final: FinalSelection, n_configs: int, n_metrics: int) -> None:
    columns = final.inner_scores
    for field, limit, target in (("config", n_configs, "configurations"), ("metric", n_metrics, "design.metrics"),
                                 ("inner_fold", final.n_inner_folds, "final.n_inner_folds")):
        values = getattr(columns, field)
        if len(outside := np.flatnonzero((values < 0) | (values >= limit))):
            raise ValueError(f"final.inner_scores.{field}[{outside[0]}]: {values[outside[0]]} is not a position "
                             f"in {target} (0..{limit - 1})")
    for position, config in enumerate([*final.family_winners, *([final.config] if final.config is not None
                                                                 else [])]):
        if not 0 <= config < n_configs:
            where = f"final.family_winners[{position}]" if position < len(final.family_winners) else "final.config"
            raise ValueError(f"{where}: {config} is not a position in configurations (0..{n_configs - 1})")
    if final.model_skops is not None:
        _check_base64("final.model_skops", final.model_skops)


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
        raise ValueError(f"{where}.config: {item.config} is not a position in configurations "
                         f"(0..{n_configs - 1})")


def _check_base64(where: str, text: str) -> None:
    try:
        base64.b64decode(text, validate=True)
    except ValueError:
        raise ValueError(f"{where}: not base64 text (received {text[:40]!r}...)") from None


def _check_plain_json(where: str, value: Any, depth: int = 0) -> None:
    """Refuse what a JSON column cannot keep or give back: NaN and infinities (not JSON), text holding NUL
    or unpaired surrogates (not UTF-8), and nesting deeper than ``MAX_DEPTH``."""
    if depth > MAX_DEPTH:
        raise ValueError(f"{where}: nested deeper than {MAX_DEPTH} levels")
    if isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"{where}: {value} is not a finite number; send null, or the text {str(value)!r}")
    if isinstance(value, str):
        _check_text(where, value)
    elif isinstance(value, list):
        for position, item in enumerate(value):
            _check_plain_json(f"{where}[{position}]", item, depth + 1)
    elif isinstance(value, dict):
        for key, item in value.items():
            _check_text(f"{where}, key {key[:40]!r},", key)
            _check_plain_json(f"{where}[{key[:40]!r}]", item, depth + 1)


def _check_text(where: str, text: str) -> None:
    try:
        _storable_text(text)
    except ValueError as error:
        raise ValueError(f"{where} {error}") from None


def _check_columns(name, columns, folds, n_configs, n_metrics, n_inner_folds) -> None:
    """Every row's references in range; numpy finds the first row that is not, for the message."""
    for field, target, limit in (("config", "configurations", n_configs), ("metric", "design.metrics", n_metrics)):
        values = getattr(columns, field)
        if len(outside := np.flatnonzero((values < 0) | (values >= limit))):
            raise ValueError(f"{name}.{field}[{outside[0]}]: {values[outside[0]]} is not a position in {target} "
                             f"(0..{limit - 1})")
    repeats, outer_folds = columns.repeat, columns.outer_fold
    # (repeat, outer fold) as one number: folds' repeats stay below MAX_COUNT, so it fits int64
    width = 1 + max(o for _, o in folds)
    fold_keys = np.array([r * width + o for r, o in folds], dtype=np.int64)
    known = (repeats >= 0) & (repeats <= MAX_COUNT) & (outer_folds >= 0) & (outer_folds < width)
    keys = repeats[known].astype(np.int64) * width + outer_folds[known].astype(np.int64)
    known[known] = np.isin(keys, fold_keys)
    if len(unknown := np.flatnonzero(~known)):
        raise ValueError(f"{name}.outer_fold[{unknown[0]}]: repeat {repeats[unknown[0]]}, outer fold "
                         f"{outer_folds[unknown[0]]} is not in outer_folds")
    if isinstance(columns, InnerScores):
        values = columns.inner_fold
        if len(outside := np.flatnonzero((values < 0) | (values >= n_inner_folds))):
            raise ValueError(f"inner_scores.inner_fold[{outside[0]}]: {values[outside[0]]} is out of range of "
                             f"design.n_inner_folds (0..{n_inner_folds - 1})")
