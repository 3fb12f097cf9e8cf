"""What a run returns: the payload, read as tables, with ways to keep it."""

from __future__ import annotations

import base64
from dataclasses import dataclass
from functools import cached_property

import pandas as pd

from foldwise import display, frames
from foldwise.definitions import HEADLINE_LEVEL, HEADLINE_METHOD, NestedEstimate, nested_estimate
from foldwise.payload import AssessmentPayload
from foldwise.stats.intervals import Interval, bbc_interval, student_t_spread


@dataclass(frozen=True)
class FinalChoice:
    """What the final selection chose: a configuration of a family, with its parameters."""

    family: str
    config: str
    params: dict


class Assessment:
    """One nested cross-validation with every inner and outer score.

    Tables (pandas DataFrames): ``inner_scores``, ``outer_scores``, ``winners`` (overall fold winners),
    ``family_winners`` and ``failures``; ``summary()`` per family; ``save(...)`` into a store, ``push(...)`` to a
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
    def failures(self) -> pd.DataFrame:
        """Every failed fit, or failed part of a fit (one metric's scoring, the outer predictions), with
        its stage and message (``frames.failures_frame``)."""
        return frames.failures_frame(self.payload)

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
        return self._estimate(HEADLINE_LEVEL)

    def interval(self, level: float = HEADLINE_LEVEL, method: str = HEADLINE_METHOD, *,
                 n_bootstrap: int = 1000, random_state=0) -> Interval:
        """An interval for the score of the select-and-refit procedure at this sample size, in the metric's own
        orientation (scikit-learn's: greater is better).

        ``method``: ``"corrected_t"`` (the headline: the corrected resampled t interval around the nested
        estimate, with or without repeats), ``"bbc"`` (the bootstrap bias-corrected interval from the pooled
        outer-test predictions of every configuration; needs a run that kept them, and uses the first repeat)
        or ``"student_t_spread"`` (the plain t interval over the outer folds: a description of their spread,
        not a confidence interval). See ``foldwise.stats.intervals``.
        """
        if method == "corrected_t":
            return self._estimate(level).interval
        if method == "student_t_spread":
            return student_t_spread(self.winners["outer_score"].to_numpy(dtype=float), level=level)
        if method == "bbc":
            from foldwise.pooling import pooled_predictions

            pooled, y_true = pooled_predictions(self.payload)
            return bbc_interval(pooled, y_true, metric=self.selection_metric, classes=self.payload.design.classes,
                                level=level, n_bootstrap=n_bootstrap, random_state=random_state)
        raise ValueError(f"method must be 'corrected_t', 'bbc' or 'student_t_spread'; received {method!r}")

    def _estimate(self, level: float) -> NestedEstimate:
        design, winners = self.payload.design, self.winners
        sizes = {(f.repeat, f.outer_fold): (f.n_train, len(f.test_indices)) for f in self.payload.outer_folds}
        folds = list(zip(winners["repeat"], winners["outer_fold"], strict=True))
        return nested_estimate(winners["outer_score"].to_numpy(dtype=float),
                               n_folds=design.n_repeats * design.n_outer_folds,
                               n_train=[sizes[fold][0] for fold in folds], n_test=[sizes[fold][1] for fold in folds],
                               level=level)

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
                          allowed=[family.estimator_class for family in self.payload.families],
                          libraries=self.payload.design.trusted)

    def save(self, target: str) -> bool:
        """Write into a store (a path or SQLAlchemy URL) with no server; True when newly stored."""
        from foldwise.client import save

        return save(self.payload, target)

    def push(self, url: str, token: str | None = None, **options) -> bool:
        """Send to a foldwise server; spooled locally when it cannot be reached."""
        from foldwise.client import push

        return push(self.payload, url, token=token, **options)
