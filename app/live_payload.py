"""What a running nested cross-validation tells a foldwise server: the whole state of the run so far.

``nested_cv(..., live=URL)`` sends a ``LiveReport`` when the run starts, every few seconds after, as each
outer fold completes and when the run ends or stops. Each report carries everything known so far (the
progress and every completed fold), never a difference from the last one, so a server that missed
reports while it was unreachable is caught up by the next one, and a report sent twice changes nothing.
The finished assessment is pushed under the run's uuid (``AssessmentPayload``), which replaces the live
record once stored.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Literal

from pydantic import Field, FiniteFloat, field_validator, model_validator

from foldwise.payload import MAX_COUNT, MetricName, Name, Text, _Strict

LIVE_SCHEMA_VERSION = 1
MAX_FOLDS = 10_000  # outer folds over all repeats: a page lists each of them
Score = FiniteFloat | None  # null where the fit or its scoring failed


class LiveConfiguration(_Strict):
    id: Name = Field(min_length=1, max_length=2_000, description="the configuration's id: family plus "
                                                                  "canonical params, as in the assessment")
    family: Name = Field(min_length=1, max_length=200)


class LiveWinner(_Strict):
    """A family's winner in one completed outer fold."""

    config: int = Field(ge=0, le=MAX_COUNT, description="position in `configurations`")
    inner_mean: Score = Field(description="its inner mean on the selection metric (the first)")
    outer_scores: list[Score] = Field(description="its outer score on each metric, in `metrics` order")


class LiveFold(_Strict):
    """An outer fold whose inner selection and outer refits are all done."""

    repeat: int = Field(ge=0, le=MAX_COUNT)
    outer_fold: int = Field(ge=0, le=MAX_COUNT)
    n_train: int = Field(ge=1, le=MAX_COUNT)
    n_test: int = Field(ge=1, le=MAX_COUNT)
    winners: list[LiveWinner] = Field(description="each family's winner; a family whose configurations all "
                                                  "failed in this fold has none")
    overall: int | None = Field(ge=0, le=MAX_COUNT, description="the fold winner (a position in "
                                "`configurations`, one of `winners`); null when every configuration failed")


class LiveReport(_Strict):
    """The state of a running nested cross-validation, as sent to ``POST /api/live/{uuid}``."""

    schema_version: Literal[1] = LIVE_SCHEMA_VERSION
    name: Name = Field(min_length=1, max_length=200)
    dataset: Name | None = Field(default=None, max_length=200)
    task: Literal["classification", "regression"]
    metrics: list[MetricName] = Field(min_length=1, max_length=100, description="unique; the first selects")
    n_repeats: int = Field(ge=1, le=10_000)
    n_outer_folds: int = Field(ge=1, le=10_000, description="outer folds per repeat")
    n_inner_folds: int = Field(ge=1, le=10_000)
    configurations: list[LiveConfiguration] = Field(min_length=1)
    started_at: datetime = Field(strict=False, description="when the run started, with its UTC offset")
    sent_at: datetime = Field(strict=False, description="when this report was made, with its UTC offset: a "
                              "server keeps the newest report of a run and ignores older ones arriving late")
    state: Literal["running", "done", "stopped"] = Field(
        description="running; done (every fit finished, the assessment on its way); stopped (by an error or an "
                    "interrupt)")
    reason: Text | None = Field(default=None, max_length=2_000, description="why the run stopped")
    fits_done: int = Field(ge=0, le=MAX_COUNT)
    fits_total: int = Field(ge=1, le=MAX_COUNT)
    seconds_per_fit: FiniteFloat | None = Field(default=None, ge=0, le=1e9, description="wall seconds per "
                                                "finished fit so far (the pool's pace), null before the first")
    mean_fit_time: FiniteFloat | None = Field(default=None, ge=0, le=1e9, description="mean of the fits' own "
                                              "fit times so far, null before the first")
    expected_end: datetime | None = Field(default=None, strict=False, description="the projected end")
    folds: list[LiveFold] = Field(default_factory=list, description="the completed outer folds")

    @field_validator("started_at", "sent_at", "expected_end")
    @classmethod
    def _zoned(cls, value: datetime | None) -> datetime | None:
        if value is None:
            return None
        if value.utcoffset() is None:
            raise ValueError("needs a UTC offset (e.g. 2026-01-01T12:00:00+00:00): a server elsewhere could "
                             "not tell when it was")
        try:
            value.astimezone(UTC)
        except OverflowError:
            raise ValueError(f"{value.isoformat()} lies outside the years 1..9999 once taken to UTC") from None
        return value

    @model_validator(mode="after")
    def _consistent(self):
        problems = list(_problems(self))
        if problems:
            raise ValueError("; ".join(problems))
        return self

    @property
    def n_folds(self) -> int:
        return self.n_repeats * self.n_outer_folds

    @property
    def families(self) -> list[str]:
        return list(dict.fromkeys(config.family for config in self.configurations))


def _problems(report: LiveReport):
    """What in a report contradicts the rest of it, each naming its field."""
    if len(set(report.metrics)) < len(report.metrics):
        yield f"metrics {report.metrics} name one metric twice"
    ids = [config.id for config in report.configurations]
    if len(set(ids)) < len(ids):
        yield "configurations: two share one id"
    if report.fits_done > report.fits_total:
        yield f"fits_done ({report.fits_done}) exceeds fits_total ({report.fits_total})"
    if (report.state == "stopped") != (report.reason is not None):
        yield "reason: give one exactly when state is 'stopped'"
    if report.n_folds > MAX_FOLDS:
        yield (f"n_repeats × n_outer_folds is {report.n_repeats} × {report.n_outer_folds} = {report.n_folds}; a live "
               f"view shows at most {MAX_FOLDS} outer folds")
    if len(report.folds) > report.n_folds:
        yield f"folds: {len(report.folds)} completed folds, but the design has {report.n_folds}"
    seen = set()
    for position, fold in enumerate(report.folds):
        where = f"folds[{position}]"
        if fold.repeat >= report.n_repeats or fold.outer_fold >= report.n_outer_folds:
            yield (f"{where}: repeat {fold.repeat}, outer fold {fold.outer_fold} is outside the design of "
                   f"{report.n_repeats} × {report.n_outer_folds} outer folds")
        if (fold.repeat, fold.outer_fold) in seen:
            yield f"{where}: repeat {fold.repeat}, outer fold {fold.outer_fold} is sent twice"
        seen.add((fold.repeat, fold.outer_fold))
        families = []
        for winner in fold.winners:
            if winner.config >= len(report.configurations):
                yield f"{where}.winners: config {winner.config} is not among the {len(ids)} configurations"
                continue
            families.append(report.configurations[winner.config].family)
            if len(winner.outer_scores) != len(report.metrics):
                yield (f"{where}.winners: config {winner.config} has {len(winner.outer_scores)} outer scores "
                       f"for {len(report.metrics)} metrics")
        if len(set(families)) < len(families):
            yield f"{where}.winners: one family has two winners"
        if fold.overall is not None and fold.overall not in {winner.config for winner in fold.winners}:
            yield f"{where}.overall: config {fold.overall} is not one of the fold's family winners"
        if fold.overall is None and fold.winners:
            yield f"{where}.overall: null, but the fold has family winners (the best of them is the fold winner)"
        means = [winner.inner_mean for winner in fold.winners if winner.inner_mean is not None]
        chosen = [winner.inner_mean for winner in fold.winners if winner.config == fold.overall]
        if chosen and means and (chosen[0] is None or chosen[0] < max(means)):
            yield (f"{where}.overall: config {fold.overall} has not the greatest inner mean of the fold's "
                   f"family winners (the selection rule picks the greatest)")
