"""A stored assessment as the lists of assessments show it: one declared row of ``store.INDEX_COLUMNS``."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd


@dataclass(frozen=True)
class ListedAssessment:
    uuid: str
    name: str
    dataset: str | None
    created_at: str  # ISO 8601, UTC
    task: str
    n_repeats: int
    n_outer_folds: int
    n_inner_folds: int
    n_configs: int
    families: list[str]  # in the assessment's order
    selection_metric: str
    estimate_mean: float  # the stored nested estimate on the selection metric; NaN when no outer fold scored
    estimate_sd: float
    estimate_n_used: int  # outer folds with a score, of estimate_n_folds
    estimate_n_folds: int
    estimate_low: float  # its headline interval; NaN when it cannot be computed
    estimate_high: float


def listed_fields(row: dict) -> dict:
    """A row of ``StoreReader.assessments()`` (as ``DataFrame.to_dict(orient="records")`` gives it) as the
    ``ListedAssessment`` fields, for that class or one that adds to it."""
    return {"uuid": row["uuid"], "name": row["name"], "dataset": _text(row["dataset"]),
            "created_at": pd.Timestamp(row["created_at"]).isoformat(), "task": row["task"],
            "n_repeats": int(row["n_repeats"]), "n_outer_folds": int(row["n_outer_folds"]),
            "n_inner_folds": int(row["n_inner_folds"]), "n_configs": int(row["n_configs"]),
            "families": list(row["families"]), "selection_metric": row["selection_metric"],
            "estimate_mean": float(row["estimate_mean"]), "estimate_sd": float(row["estimate_sd"]),
            "estimate_n_used": int(row["estimate_n_used"]), "estimate_n_folds": int(row["estimate_n_folds"]),
            "estimate_low": float(row["estimate_low"]), "estimate_high": float(row["estimate_high"])}


def _text(value) -> str | None:
    return None if value is None or (isinstance(value, float) and value != value) else value
