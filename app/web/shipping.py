"""What to ship: the final selection's choice beside the outer folds' choices, for the report and the page."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from foldwise.web.formatting import params_text


@dataclass(frozen=True)
class ParameterAgreement:
    name: str
    value: str  # as chosen on all rows
    same: int   # outer folds whose winner is of the same family and chose this value


@dataclass(frozen=True)
class FinalSummary:
    """The final choice and how many outer folds chose the same configuration, family and parameter values."""

    family: str
    config: str
    params: str
    same_config: int
    same_family: int
    n_folds: int
    parameters: list[ParameterAgreement]

    @property
    def unstable(self) -> bool:
        """Fewer than half the outer folds chose the configuration shipped: the selection itself varies."""
        return self.same_config * 2 < self.n_folds


def final_summary(family: str, config: str, params: dict, winners: pd.DataFrame) -> FinalSummary:
    """``winners`` has one row per outer fold with its overall winner's ``family``, ``config`` and ``params``."""
    parameters = [ParameterAgreement(name=key.rsplit("__", 1)[-1], value=str(value),
                                     same=sum(row.family == family and row.params.get(key) == value
                                              for row in winners.itertuples()))
                  for key, value in params.items()]
    return FinalSummary(family=family, config=config, params=params_text(params),
                        same_config=int((winners["config"] == config).sum()),
                        same_family=int((winners["family"] == family).sum()), n_folds=len(winners),
                        parameters=parameters)
