"""What a run returns: the payload, read as tables, with ways to keep it."""

from __future__ import annotations

import base64
from dataclasses import dataclass
from functools import cached_property

import pandas as pd

from foldwise import display, frames
from foldwise.definitions import NestedEstimate, nested_estimate
from foldwise.payload import AssessmentPayload


@dataclass(frozen=True)
class FinalChoice:
    """What the final selection chose: a configuration of a family, with its parameters."""

    family: str
    config: str
    params: dict


class Assessment:
    """One nested cross-validation with every inner and outer score.

    Tables (pandas DataFrames): ``inner_scores``, ``outer_scores``, ``winners`` (overall fold winners)
    and ``family_winners``; ``summary()`` per family; ``save(...)`` into a store, ``push(...)`` to a
    server.
    """

    def __init__(self, payload: AssessmentPayload):
        self.payload = payload

    def __repr__(self) -> str:
        return display.text_repr(self)

    def _repr_html_(self) -> str:
        """Name, design, nested estimate with its fold count, family summary and fold winners, for notebooks."""
        return display.html_repr(self)

    @property
    def uuid(self) -> str:
        return str(self.payload.uuid)

    @property
    def name(self) -> str:
        return self.payload.name

    @property
    def selection_metric(self) -> str:
        return self.payload.design.selection_metric

    @cached_property
    def inner_scores(self) -> pd.DataFrame:
        return frames.inner_frame(self.payload)

    @cached_property
    def outer_scores(self) -> pd.DataFrame:
        return frames.outer_frame(self.payload)

    @cached_property
    def winners(self) -> pd.DataFrame:
        return frames.winners_frame(self.inner_scores, self.outer_scores, self.selection_metric)

    @cached_property
    def family_winners(self) -> pd.DataFrame:
        return frames.winners_frame(self.inner_scores, self.outer_scores, self.selection_metric,
                                    flag="family_winner")

    def summary(self, metric: str | None = None) -> pd.DataFrame:
        """Per family: mean, sd, min and max of its fold winners' outer scores, with the outer folds used
        (``n``) and failed (``n_failed``)."""
        design = self.payload.design
        return frames.family_summary(self.outer_scores, metric or self.selection_metric,
                                     families=[family.name for family in self.payload.families],
                                     n_folds=design.n_repeats * design.n_outer_folds)

    @property
    def nested_estimate(self) -> NestedEstimate:
        """The score of the selection procedure: mean and sd of the overall fold winners' outer scores,
        with the outer folds it used (``n_used`` of ``n_folds``; ``described`` says it in words)."""
        design = self.payload.design
        return nested_estimate(self.winners["outer_score"].to_numpy(dtype=float),
                               n_folds=design.n_repeats * design.n_outer_folds)

    @property
    def final_choice(self) -> FinalChoice | None:
        """The configuration the final selection chose on every row (``nested_cv(..., final=True)``)."""
        final = self.payload.final
        if final is None or final.config is None:
            return None
        config = self.payload.configurations[final.config]
        return FinalChoice(family=config.family, config=config.id, params=config.params)

    @cached_property
    def final_scores(self) -> pd.DataFrame:
        """The final selection's inner scores: the columns of ``inner_scores`` less repeat and outer fold."""
        return frames.final_frame(self.payload)

    @cached_property
    def final_model(self):
        """The chosen configuration refit on every row, ready for ``predict``: the model the nested estimate
        is about. Read with the same trusted skops loader as ensembles."""
        final = self.payload.final
        if final is None:
            raise LookupError("this assessment has no final selection: run nested_cv(..., final=True)")
        if final.model_skops is None:
            reason = final.refit_error or "every configuration failed, or skops could not write the model"
            raise LookupError(f"the final selection kept no model: {reason}")
        from foldwise.ensemble import load_skops

        return load_skops(base64.b64decode(final.model_skops), what="the final model",
                          allowed=[family.estimator_class for family in self.payload.families])

    def save(self, target: str) -> bool:
        """Write into a store (a path or SQLAlchemy URL) with no server; True when newly stored."""
        from foldwise.client import save

        return save(self.payload, target)

    def push(self, url: str, token: str | None = None, **options) -> bool:
        """Send to a foldwise server; spooled locally when it cannot be reached."""
        from foldwise.client import push

        return push(self.payload, url, token=token, **options)
