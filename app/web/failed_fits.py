"""Failed fits as the pages list them: one declared row per failure the store recorded (``reader.failures``)."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from foldwise.web.serialise import records


@dataclass(frozen=True)
class FailedFit:
    """A failed fit, or a failed part of one (its scoring on one metric, its predictions)."""

    level: str  # "inner" or "outer"
    repeat: int
    outer_fold: int
    inner_fold: int | None  # None for an outer fit
    family: str
    config: str
    metric: str | None  # the one metric whose scoring failed; None when the whole fit or its predictions failed
    stage: str | None  # "fit", "score" or "predict"; None when recorded before stages were
    message: str


@dataclass(frozen=True)
class FoldFailure:
    """A failed fit within one outer fold (the page names the fold): FailedFit without repeat and outer_fold."""

    level: str
    inner_fold: int | None
    family: str
    config: str
    metric: str | None
    stage: str | None
    message: str


def failed_fits(failures: pd.DataFrame) -> list[FailedFit]:
    return [FailedFit(**row) for row in records(failures)]


def fold_failures(failures: pd.DataFrame) -> list[FoldFailure]:
    return [FoldFailure(**row) for row in records(failures.drop(columns=["repeat", "outer_fold"]))]
