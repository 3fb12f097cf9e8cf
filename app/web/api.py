"""The JSON API. Every read endpoint is filled by the same functions as the page that shows it."""

from __future__ import annotations

from typing import Literal

from fastapi import APIRouter, BackgroundTasks, Query, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse, Response
from fastapi.routing import APIRoute
from pydantic import ValidationError
from sqlalchemy import text

from foldwise.payload import AssessmentPayload
from foldwise.store import (
    checkpoint,
    family_winners_for,
    inner_scores_for,
    insert_assessment,
    outer_scores_for,
    winners_for,
)
from foldwise.web.lookup import metric_or_422, record_or_404
from foldwise.web.pages.assessment_detail import assessment_context
from foldwise.web.pages.index import index_context
from foldwise.web.serialise import records, to_csv

router = APIRouter(prefix="/api")


class _PushRoute(APIRoute):
    """The push route, where pydantic reads a valid body straight from its bytes.

    Read as FastAPI reads any body (``json.loads`` into Python objects, then validated), an assessment
    of 600,000 inner scores spends about twice as long before the store sees it. A body pydantic
    refuses, or one not sent as JSON, takes FastAPI's own way after all, so that every rejection is the
    usual 422 naming the JSON path of the problem.
    """

    def get_route_handler(self):
        usual = super().get_route_handler()

        async def handler(request: Request) -> Response:
            if request.headers.get("content-type", "").split(";")[0].strip() != "application/json":
                return await usual(request)
            try:
                payload = await run_in_threadpool(AssessmentPayload.model_validate_json, await request.body())
            except ValidationError:
                return await usual(request)  # the body is kept: FastAPI reads it from memory
            background = BackgroundTasks()
            response = await run_in_threadpool(_stored, request, payload, background)
            response.background = background
            return response

        return handler


def push_assessment(request: Request, payload: AssessmentPayload, background: BackgroundTasks):
    """Store one assessment, in one transaction; pushing the same uuid again changes nothing (200)."""
    return _stored(request, payload, background)


router.add_api_route("/assessments", push_assessment, methods=["POST"], status_code=201,
                     responses={200: {"description": "already stored"}}, route_class_override=_PushRoute)


def _stored(request: Request, payload: AssessmentPayload, background: BackgroundTasks) -> JSONResponse:
    """Store ``payload`` and answer once it is committed; copying SQLite's write-ahead log into the
    database file follows the answer, so the client does not wait for a second write of every page."""
    engine = request.app.state.engine
    created = insert_assessment(engine, payload, defer_checkpoint=True)
    background.add_task(checkpoint, engine)
    body = {"uuid": str(payload.uuid), "created": created,
            "url": str(request.url_for("assessment_detail", uuid=str(payload.uuid)))}
    return JSONResponse(body, status_code=201 if created else 200)


@router.get("/assessments")
def list_all(request: Request, dataset: str | None = None, name: str | None = None):
    return index_context(request.app.state.engine, dataset=dataset, name=name).assessments


@router.get("/assessments/{uuid}")
def one(request: Request, uuid: str, metric: str | None = None):
    page = assessment_context(request.app.state.engine, uuid, metric=metric)
    record = page.record
    return {
        "uuid": record.uuid, "name": record.name, "dataset": record.dataset,
        "created_at": record.created_at.isoformat(), "design": record.design.model_dump(),
        "design_text": page.design, "families": [family.model_dump() for family in record.families],
        "configurations": [config.model_dump() for config in record.configurations],
        "fingerprint": record.fingerprint, "versions": record.versions, "seeds": record.seeds,
        "total_fit_time": record.total_fit_time, "metric": page.metric, "nested_estimate": page.estimate,
        "family_summary": page.summary, "n_failures": page.n_failures, "failures": page.failures,
    }


@router.get("/assessments/{uuid}/scores")
def scores(request: Request, uuid: str, level: Literal["inner", "outer"] = "outer",
           format: Literal["json", "csv"] = Query("json")):
    engine = request.app.state.engine
    record_or_404(engine, uuid)
    frame = inner_scores_for(engine, uuid) if level == "inner" else outer_scores_for(engine, uuid)
    if format == "csv":
        return Response(to_csv(frame), media_type="text/csv", headers={
            "content-disposition": f'attachment; filename="{uuid}-{level}-scores.csv"'})
    return records(frame)


@router.get("/assessments/{uuid}/winners")
def winners(request: Request, uuid: str, metric: str | None = None,
            level: Literal["overall", "family"] = "overall"):
    """Fold winners with inner mean ± sd, outer score and optimism (inner mean − outer score)."""
    engine = request.app.state.engine
    metric = metric_or_422(record_or_404(engine, uuid), metric)
    read = winners_for if level == "overall" else family_winners_for
    return records(read(engine, uuid, metric=metric))


health = APIRouter()


@health.get("/healthz")
def healthz(request: Request):
    with request.app.state.engine.connect() as connection:
        connection.execute(text("SELECT 1"))
    return {"status": "ok"}
