"""Runs in progress: the newest report of each (``foldwise.live_payload``), kept apart from finished assessments.

A run reports under its uuid, and its finished assessment is pushed under the same uuid. The assessment
goes in by ``insert_assessment``'s one transaction, so a stored assessment is never partial; from the
moment it commits the run counts as finished: every read here joins the two tables on the uuid, and the
live record then points to the assessment (``LiveRun.assessment``) instead of being shown as running.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import UTC, datetime

from sqlalchemy import Connection, Engine, delete, insert, select, update
from sqlalchemy.exc import IntegrityError

from foldwise.live_payload import LiveReport
from foldwise.store import tables
from foldwise.store.engine import write_transaction
from foldwise.store.lookup import uuid_text

CREATED, UPDATED, STALE, FINISHED = "created", "updated", "stale", "finished"
# What a run cannot change between its reports: what its folds and counts refer to.
_FIXED = ("task", "metrics", "n_repeats", "n_outer_folds", "n_inner_folds", "configurations")


class LiveConflict(ValueError):
    """A report under a run's uuid that describes another run (another design or grid)."""

    def __init__(self, uuid: str, field: str):
        super().__init__(f"run {uuid} reported another {field} before; a run keeps its design and grid from its "
                         f"first report to its last: report a different run under a new uuid")
        self.field = field


@dataclass(frozen=True)
class LiveRun:
    uuid: str
    report: LiveReport  # the newest report kept, with every completed fold
    received_at: datetime  # UTC, naive: when the run last reported, by the server's clock
    assessment: str | None  # the finished assessment's uuid, once stored

    @property
    def n_folds_done(self) -> int:
        return len(self.report.folds)


def record_live_report(engine: Engine, uuid: str, report: LiveReport, *, received_at: datetime) -> str:
    """Keep ``report`` as the run's newest; ``CREATED`` or ``UPDATED``, ``STALE`` when a newer report (by its
    ``sent_at``) is kept already, ``FINISHED`` when the run's assessment is stored (nothing changes then).

    Raises ``LiveConflict`` when the run reported another design or grid before.
    """
    uuid = uuid_text(uuid)
    try:
        with write_transaction(engine) as connection:
            return _record(connection, uuid, report, _utc(received_at))
    except IntegrityError:  # another request created the run between our look and our insert: now it is there
        with write_transaction(engine) as connection:
            return _record(connection, uuid, report, _utc(received_at))


def _record(connection, uuid: str, report: LiveReport, received_at: datetime) -> str:
    runs = tables.live_runs
    if connection.execute(select(tables.assessments.c.id).where(tables.assessments.c.uuid == uuid)).first():
        return FINISHED
    kept = connection.execute(select(runs.c.id, runs.c.sent_at, runs.c.report).where(runs.c.uuid == uuid)).first()
    row = {"name": report.name, "dataset": report.dataset, "started_at": _utc(report.started_at),
           "sent_at": _utc(report.sent_at), "received_at": received_at, "state": report.state,
           "fits_done": report.fits_done, "fits_total": report.fits_total,
           "report": report.model_dump(mode="json", exclude={"folds"})}
    if kept is None:
        run_id = connection.execute(insert(runs).values(uuid=uuid, **row)).inserted_primary_key[0]
        outcome = CREATED
    else:
        before = kept.report
        for field in _FIXED:
            if before.get(field) != row["report"][field]:
                raise LiveConflict(uuid, field)
        if row["sent_at"] < kept.sent_at:
            return STALE  # an older report arriving late: the newer one stays
        run_id, outcome = kept.id, UPDATED
        connection.execute(update(runs).where(runs.c.id == run_id).values(**row))
        connection.execute(delete(tables.live_folds).where(tables.live_folds.c.live_run_id == run_id))
    if report.folds:
        connection.execute(insert(tables.live_folds), [
            {"live_run_id": run_id, "repeat": fold.repeat, "outer_fold": fold.outer_fold,
             "fold": fold.model_dump(mode="json")} for fold in report.folds])
    return outcome


def live_run_in(connection: Connection, uuid: str) -> LiveRun | None:
    """The run reported under ``uuid`` with its completed folds; None when no run reported under it (or
    ``uuid`` is not a uuid). Read through the request's connection (``StoreReader.connection``)."""
    try:
        key = uuid_text(uuid)
    except ValueError:
        return None
    found = _runs(connection, tables.live_runs.c.uuid == key)
    return found[0] if found else None


def live_runs_in_progress(connection: Connection) -> list[LiveRun]:
    """Every run whose assessment is not stored, the most recently heard from first."""
    return _runs(connection, tables.assessments.c.id.is_(None))


def delete_live_run(engine: Engine, uuid: str) -> bool:
    """Forget a run's live record (a stalled run that will not come back); True when there was one."""
    with write_transaction(engine) as connection:
        result = connection.execute(delete(tables.live_runs).where(tables.live_runs.c.uuid == uuid_text(uuid)))
    return result.rowcount > 0


def _runs(connection, condition) -> list[LiveRun]:
    runs, folds, assessments = tables.live_runs, tables.live_folds, tables.assessments
    rows = connection.execute(
        select(runs.c.id, runs.c.uuid, runs.c.received_at, runs.c.report, assessments.c.uuid.label("assessment"))
        .select_from(runs.outerjoin(assessments, assessments.c.uuid == runs.c.uuid))
        .where(condition).order_by(runs.c.received_at.desc(), runs.c.id.desc())).all()
    if not rows:
        return []
    held: dict[int, list] = {row.id: [] for row in rows}
    for fold in connection.execute(select(folds.c.live_run_id, folds.c.fold).where(folds.c.live_run_id.in_(held))
                                   .order_by(folds.c.live_run_id, folds.c.repeat, folds.c.outer_fold)):
        held[fold.live_run_id].append(fold.fold)
    return [LiveRun(uuid=row.uuid, received_at=row.received_at, assessment=row.assessment,
                    report=LiveReport.model_validate_json(json.dumps({**row.report, "folds": held[row.id]})))
            for row in rows]


def _utc(moment: datetime) -> datetime:
    """UTC wall time without zone, as the store keeps every time."""
    return moment if moment.utcoffset() is None else moment.astimezone(UTC).replace(tzinfo=None)
