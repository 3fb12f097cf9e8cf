"""Running assessments: the index's list with progress bars, and a page per run that fills in fold by fold.

A run's status follows from its newest report and the server's clock: ``running``; ``stalled`` when it has
not reported for ``Settings.live_stall_seconds`` (killed, asleep, cut off); ``stopped`` when it said it
stopped (an error, Ctrl-C); ``done`` when every fit finished and the assessment is on its way; ``finished``
once the assessment is stored under the run's uuid, whose page then replaces the run's.

The nested estimate over the folds completed so far is the one definition (``definitions.nested_estimate``)
over those folds, always shown as partial with its count ("partial: over 3 of 5 outer folds").
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import UTC, datetime

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse

from foldwise.definitions import nested_estimate
from foldwise.store import StoreReader
from foldwise.store.live import LiveRun, live_run_in, live_runs_in_progress
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses, refusal
from foldwise.web.formatting import design_text
from foldwise.web.lookup import StoreDep

router = APIRouter()
POLL_SECONDS = 2.0  # how often an open page asks for the run's state


@dataclass(frozen=True)
class LiveRunSummary:
    """A running assessment as the index lists it."""

    uuid: str
    name: str
    dataset: str | None
    status: str  # running, stalled, stopped, done or finished
    status_text: str
    fits_done: int
    fits_total: int
    percent: float
    progress_text: str
    seconds_per_fit: float | None
    mean_fit_time: float | None
    expected_end: str | None  # ISO 8601, UTC
    expected_end_text: str
    started_at: str
    last_report_at: str
    n_folds_done: int
    n_folds: int
    design: str
    url: str
    assessment_url: str | None


@dataclass(frozen=True)
class PartialEstimate:
    metric: str
    mean: float
    sd: float
    low: float
    high: float
    n_used: int
    n_done: int
    n_folds: int
    described: str  # "partial: over 3 of 5 outer folds"


@dataclass(frozen=True)
class LiveWinnerRow:
    family: str
    config: str
    params: str
    inner_mean: float
    outer_scores: list[float]


@dataclass(frozen=True)
class LiveFoldRow:
    repeat: int
    outer_fold: int
    done: bool
    n_train: int | None
    n_test: int | None
    winner: LiveWinnerRow | None
    family_winners: list[LiveWinnerRow]


@dataclass(frozen=True)
class LiveRunContext:
    run: LiveRunSummary
    metrics: list[str]
    families: list[str]
    estimate: PartialEstimate
    folds: list[LiveFoldRow]
    poll_seconds: float


def running_summaries(request: Request, store: StoreReader) -> list[LiveRunSummary]:
    """Every run whose assessment is not stored yet, the most recently heard from first."""
    now = _now()
    return [_summary(request, run, now) for run in live_runs_in_progress(store.connection)]


def live_run_context(request: Request, store: StoreReader, uuid: str) -> LiveRunContext:
    run = _run_or_404(store, uuid)
    report = run.report
    done = {(fold.repeat, fold.outer_fold): fold for fold in report.folds}
    configs = report.configurations
    rows = []
    for repeat in range(report.n_repeats):
        for outer_fold in range(report.n_outer_folds):
            fold = done.get((repeat, outer_fold))
            if fold is None:
                rows.append(LiveFoldRow(repeat, outer_fold, False, None, None, None, []))
                continue
            winners = [_winner_row(configs[w.config].family, configs[w.config].id, w) for w in fold.winners]
            overall = next((row for w, row in zip(fold.winners, winners, strict=True) if w.config == fold.overall),
                           None)
            rows.append(LiveFoldRow(repeat, outer_fold, True, fold.n_train, fold.n_test, overall, winners))
    return LiveRunContext(run=_summary(request, run, _now()), metrics=list(report.metrics), families=report.families,
                          estimate=_partial_estimate(run), folds=rows, poll_seconds=POLL_SECONDS)


def _partial_estimate(run: LiveRun) -> PartialEstimate:
    """The nested estimate over the completed folds: their overall winners' outer scores on the selection metric,
    a completed fold without a winner (every configuration failed) or without its score counted as failed."""
    report = run.report
    scores, n_train, n_test = [], [], []
    for fold in sorted(report.folds, key=lambda fold: (fold.repeat, fold.outer_fold)):
        winner = next((w for w in fold.winners if w.config == fold.overall), None)
        if winner is None:
            continue
        first = winner.outer_scores[0]
        scores.append(math.nan if first is None else first)
        n_train.append(fold.n_train)
        n_test.append(fold.n_test)
    estimate = nested_estimate(scores, n_folds=len(report.folds), n_train=n_train, n_test=n_test)
    unit = "outer fold" if report.n_folds == 1 else "outer folds"
    described = f"partial: over {estimate.n_used} of {report.n_folds} {unit}"
    if estimate.n_failed:
        described += f" ({len(report.folds)} completed, {estimate.n_failed} of them failed)"
    interval = estimate.interval
    return PartialEstimate(metric=report.metrics[0], mean=estimate.mean, sd=estimate.sd,
                           low=math.nan if interval is None else interval.low,
                           high=math.nan if interval is None else interval.high, n_used=estimate.n_used,
                           n_done=len(report.folds), n_folds=report.n_folds, described=described)


def _winner_row(family: str, config_id: str, winner) -> LiveWinnerRow:
    params = config_id[len(family) + 1:] if config_id.startswith(family + ":") else config_id
    return LiveWinnerRow(family=family, config=config_id, params=params,
                         inner_mean=math.nan if winner.inner_mean is None else winner.inner_mean,
                         outer_scores=[math.nan if s is None else s for s in winner.outer_scores])


def _summary(request: Request, run: LiveRun, now: datetime) -> LiveRunSummary:
    report = run.report
    status, status_text = _status(run, now, request.app.state.settings.live_stall_seconds)
    end = report.expected_end.astimezone(UTC).replace(tzinfo=None) if report.expected_end is not None else None
    percent = 100.0 * report.fits_done / report.fits_total
    finished = run.assessment is not None
    return LiveRunSummary(
        uuid=run.uuid, name=report.name, dataset=report.dataset, status=status, status_text=status_text,
        fits_done=report.fits_done, fits_total=report.fits_total, percent=percent,
        progress_text=f"{report.fits_done:,} of {report.fits_total:,} fits ({percent:.1f}%)",
        seconds_per_fit=report.seconds_per_fit, mean_fit_time=report.mean_fit_time,
        expected_end=None if end is None else _iso(end),
        expected_end_text=_expected_end_text(end, now, status),
        started_at=_iso(report.started_at.astimezone(UTC).replace(tzinfo=None)),
        last_report_at=_iso(run.received_at), n_folds_done=run.n_folds_done, n_folds=report.n_folds,
        design=design_text(report.n_outer_folds, report.n_inner_folds, report.n_repeats),
        url=str(request.url_for("live_run", uuid=run.uuid)),
        assessment_url=str(request.url_for("assessment_detail", uuid=run.assessment)) if finished else None)


def _status(run: LiveRun, now: datetime, stall_after: float) -> tuple[str, str]:
    if run.assessment is not None:
        return "finished", "finished: the complete assessment is stored"
    state = run.report.state
    if state == "stopped":
        return "stopped", f"stopped at {_clock(run.received_at)}: {run.report.reason}"
    silent = (now - run.received_at).total_seconds()
    if silent > stall_after:
        return "stalled", (f"stalled since {_clock(run.received_at)} ({_span(silent)} without a report; the run "
                           f"may have been killed, or lost its way to this server)")
    if state == "done":
        return "done", "every fit finished: the complete assessment is on its way"
    return "running", f"running, last report {_span(silent)} ago"


def _expected_end_text(end: datetime | None, now: datetime, status: str) -> str:
    if status in ("finished", "done"):
        return "done"
    if end is None:
        return "after the first fits"
    left = (end - now).total_seconds()
    when = _clock(end) if end.date() == now.date() else end.strftime("%Y-%m-%d %H:%M UTC")
    return f"{when} (in {_span(left)})" if left > 0 else f"{when} (overdue by {_span(-left)})"


def _span(seconds: float) -> str:
    seconds = max(0.0, seconds)
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    hours, minutes = divmod(round(seconds / 60), 60)
    if hours < 48:
        return f"{hours} h {minutes} min"
    return f"{hours / 24:.1f} days"


def _clock(moment: datetime) -> str:
    return moment.strftime("%H:%M:%S UTC")


def _iso(moment: datetime) -> str:
    return moment.replace(tzinfo=UTC).isoformat()


def _now() -> datetime:
    return datetime.now(UTC).replace(tzinfo=None)


def _run_or_404(store: StoreReader, uuid: str) -> LiveRun:
    run = live_run_in(store.connection, uuid)
    if run is None:
        raise refusal(404, f"no running assessment {uuid!r} in this store", loc=["path", "uuid"])
    return run


@router.get("/live/{uuid}", name="live_run", response_class=HTMLResponse,
            responses={303: {"description": "the run finished: its assessment's page"},
                       **error_responses(404, html=True)})
def live_run(request: Request, store: StoreDep, uuid: str):
    context = live_run_context(request, store, uuid)
    if context.run.assessment_url is not None:
        return RedirectResponse(context.run.assessment_url, status_code=303)
    return request.app.state.templates.TemplateResponse(request, "live_run.html", {"page": context})


@router.get("/api/live", name="live_runs_json", response_model=list[context_model(LiveRunSummary)])
def live_runs_json(request: Request, store: StoreDep):
    """Every running assessment (not yet stored): progress, pace, expected end and status."""
    return [context_json(summary) for summary in running_summaries(request, store)]


@router.get("/api/live/{uuid}", name="live_run_json", response_model=context_model(LiveRunContext),
            responses=error_responses(404))
def live_run_json(request: Request, store: StoreDep, uuid: str):
    """A run's progress, its completed folds and the partial nested estimate; a finished run names its
    assessment (``run.assessment_url``)."""
    return context_json(live_run_context(request, store, uuid))

