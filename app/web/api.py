"""The JSON API. Every read endpoint is filled by the same functions as the page that shows it."""

from __future__ import annotations

from dataclasses import asdict
from typing import Literal

from fastapi import APIRouter, BackgroundTasks, Query, Request
from fastapi.responses import Response
from sqlalchemy import text

from foldwise.payload import AssessmentPayload
from foldwise.web.answers import (
    AssessmentAnswer,
    AssessmentRow,
    Health,
    InnerScoreRow,
    OuterScoreRow,
    Pushed,
    WinnerRow,
)
from foldwise.web.context_json import context_json
from foldwise.web.errors import error_responses
from foldwise.web.lookup import ReaderDep, StoreDep, metric_or_422
from foldwise.web.pages.assessment_detail import assessment_context
from foldwise.web.pages.index import index_context
from foldwise.web.push import OPENAPI, PushRoute, stored
from foldwise.web.serialise import records, to_csv
from foldwise.web.shipping import shipping_json

# Beside a CSV download, where the file itself has no room for it: how the score column is oriented.
SCORE_SIGN_HEADER = "x-foldwise-score-sign"
SCORE_SIGN_NOTE = ("scikit-learn: greater is better; a metric named neg_* is the negated loss "
                   "(neg_root_mean_squared_error = -RMSE)")

router = APIRouter(prefix="/api")


def push_assessment(request: Request, payload: AssessmentPayload, background: BackgroundTasks):
    """Store one assessment, in one transaction; pushing the same uuid again changes nothing (200).

    The body is JSON (score columns as lists or packed) or a packed body (``foldwise.wire``), as
    ``foldwise.push`` sends it.
    """
    return stored(request, payload, background)


router.add_api_route("/assessments", push_assessment, name="push_assessment", methods=["POST"], status_code=201,
                     response_model=Pushed,
                     responses={200: {"description": "this uuid is stored already, with the same content",
                                      "model": Pushed}, **error_responses(409, 422)},
                     route_class_override=PushRoute, openapi_extra=OPENAPI)


@router.get("/assessments", name="index_json", response_model=list[AssessmentRow])
def index_json(store: StoreDep, dataset: str | None = None, name: str | None = None):
    return [context_json(row) for row in index_context(store, dataset=dataset, name=name).assessments]


@router.get("/assessments/{uuid}", name="assessment_detail_json", response_model=AssessmentAnswer,
            responses=error_responses(404, 422))
def assessment_detail_json(reader: ReaderDep, metric: str | None = None):
    page = assessment_context(reader, metric=metric)
    record = page.record
    return {
        "uuid": record.uuid, "name": record.name, "dataset": record.dataset,
        "created_at": record.created_at.isoformat(), "design": record.design.model_dump(),
        "design_text": page.design, "families": [family.model_dump() for family in record.families],
        "configurations": [config.model_dump() for config in record.configurations],
        "fingerprint": record.fingerprint, "versions": record.versions, "seeds": record.seeds,
        "total_fit_time": record.total_fit_time, "metric": page.metric, "nested_estimate": context_json(page.estimate),
        "family_summary": [context_json(row) for row in page.summary], "n_failures": page.n_failures,
        "failures": [context_json(failure) for failure in page.failures],
        "headline": asdict(page.headline), "shipping": shipping_json(page.shipping),
    }


@router.get("/assessments/{uuid}/scores", name="assessment_scores",
            response_model=list[InnerScoreRow] | list[OuterScoreRow],
            responses={200: {"content": {"text/csv": {"schema": {"type": "string"}}},
                             "description": "the scores, as JSON rows or (format=csv) a CSV download, in "
                                            "scikit-learn's orientation: a neg_* metric is the negated loss"},
                       **error_responses(404, 422)})
def assessment_scores(reader: ReaderDep, level: Literal["inner", "outer"] = "outer",
           format: Literal["json", "csv"] = Query("json")):
    frame = reader.inner() if level == "inner" else reader.outer()
    if format == "csv":
        return Response(to_csv(frame), media_type="text/csv", headers={
            "content-disposition": f'attachment; filename="{reader.uuid}-{level}-scores.csv"',
            SCORE_SIGN_HEADER: SCORE_SIGN_NOTE})
    return records(frame)


@router.get("/assessments/{uuid}/winners", name="assessment_winners", response_model=list[WinnerRow],
            responses=error_responses(404, 422))
def assessment_winners(reader: ReaderDep, metric: str | None = None, level: Literal["overall", "family"] = "overall"):
    """Fold winners with inner mean ± sd, outer score and optimism (inner mean − outer score)."""
    return records(reader.winners(kind=level, metric=metric_or_422(reader.record, metric)))


health = APIRouter()


@health.get("/healthz", response_model=Health)
def healthz(request: Request):
    with request.app.state.engine.connect() as connection:
        connection.execute(text("SELECT 1"))
    return {"status": "ok"}
