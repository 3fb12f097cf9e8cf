"""A fold winner as the pages show it: one declared row of ``frames.WINNER_COLUMNS``."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import pandas as pd

from foldwise.frames import WINNER_COLUMNS


@dataclass(frozen=True)
class FoldWinner:
    """The configuration that won one outer fold (overall, or within its family), with its scores on the page's
    metric; NaN where a score is undefined (a failed fit)."""

    repeat: int
    outer_fold: int
    family: str
    config: str
    params: dict[str, Any]
    inner_mean: float  # its mean inner score, the one it was chosen by on the selection metric
    inner_std: float
    outer_score: float  # refit on the outer training set, scored on its test fold
    optimism: float  # inner_mean − outer_score: positive when the inner folds flattered it


def fold_winner_rows(winners: pd.DataFrame) -> list[FoldWinner]:
    """``winners`` as ``reader.winners`` gives them, in their order."""
    return [FoldWinner(repeat=int(row["repeat"]), outer_fold=int(row["outer_fold"]), family=row["family"],
                       config=row["config"], params=row["params"], inner_mean=float(row["inner_mean"]),
                       inner_std=float(row["inner_std"]), outer_score=float(row["outer_score"]),
                       optimism=float(row["optimism"]))
            for row in winners[WINNER_COLUMNS].to_dict(orient="records")]
