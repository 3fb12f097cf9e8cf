"""The write routes of running assessments: a run's reports come in (``POST /api/live/{uuid}``), and a run
that will not come back can be forgotten (``DELETE``). Both need the write key, as the push route does."""

from __future__ import annotations

from datetime import UTC, datetime

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field

from foldwise.live_payload import LiveReport
from foldwise.store.live import CREATED, LiveConflict, delete_live_run, record_live_report
from foldwise.store.lookup import uuid_text
from foldwise.web.errors import error_responses, refusal

router = APIRouter(prefix="/api")


class LiveAccepted(BaseModel):
    model_config = ConfigDict(extra="allow")

    uuid: str
    outcome: str = Field(description="created, updated; stale (a newer report is kept: this one changed nothing); "
                                     "finished (the run's assessment is stored: nothing changes any more)")
    url: str = Field(description="the run's page (the assessment's once finished)")


@router.post("/live/{uuid}", name="report_live_run", response_model=LiveAccepted, status_code=200,
             responses={201: {"description": "the run's first report", "model": LiveAccepted},
                        **error_responses(409, 422)})
def report_live_run(request: Request, uuid: str, report: LiveReport):
    """Keep a running assessment's newest report: its progress and every completed outer fold so far.

    Each report holds the whole state of the run, so sending one again, or late, is harmless: the
    newest by ``sent_at`` is kept. The run's assessment is pushed to ``POST /api/assessments`` under the
    same uuid when it finishes, and replaces this record.
    """
    try:
        uuid = uuid_text(uuid)
    except ValueError as error:
        raise refusal(422, str(error).replace("an assessment uuid", "a run's uuid"), loc=["path", "uuid"]) from None
    try:
        outcome = record_live_report(request.app.state.engine, uuid, report,
                                     received_at=datetime.now(UTC).replace(tzinfo=None))
    except LiveConflict as conflict:
        raise refusal(409, str(conflict), loc=["body", conflict.field]) from None
    page = "assessment_detail" if outcome == "finished" else "live_run"
    body = LiveAccepted(uuid=uuid, outcome=outcome, url=str(request.url_for(page, uuid=uuid)))
    return JSONResponse(body.model_dump(), status_code=201 if outcome == CREATED else 200)


@router.delete("/live/{uuid}", name="forget_live_run", status_code=204, response_class=Response,
               responses=error_responses(404))
def forget_live_run(request: Request, uuid: str):
    """Forget a run's live record (a run that stalled and will not come back). A stored assessment stays."""
    try:
        deleted = delete_live_run(request.app.state.engine, uuid)
    except ValueError:
        deleted = False
    if not deleted:
        raise refusal(404, f"no running assessment {uuid!r} in this store", loc=["path", "uuid"])
    return Response(status_code=204)
