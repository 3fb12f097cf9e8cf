"""Ensembles of fold winners: the live estimate, saving, the saved ensemble's page and its downloads."""

from __future__ import annotations

import json
from dataclasses import dataclass

from fastapi import APIRouter, HTTPException, Query, Request
from fastapi.responses import HTMLResponse, JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field

from foldwise.payload import Name
from foldwise.store import AssessmentRecord, EnsembleRecord, StoreReader, delete_ensemble
from foldwise.web.answers import Ensemble, EnsembleEstimate, EnsembleWithEstimate
from foldwise.web.context_json import context_json
from foldwise.web.ensemble_estimate import EnsembleResult, ensemble_estimate
from foldwise.web.errors import error_responses, refusal
from foldwise.web.lookup import EnsembleDep, EnsembleRead, ReaderDep, assessment_or_404
from foldwise.web.palette import family_colours
from foldwise.web.serialise import plain, to_csv

router = APIRouter()


class PreviewRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    members: list[str] = Field(description="configuration ids, each once",
                               json_schema_extra={"minItems": 1, "uniqueItems": True})
    metric: str | None = Field(default=None, description="a recorded metric; default the selection metric")
    rope: float = Field(default=0.01, ge=0, description="half-width of the region of practical equivalence")


class SaveRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: Name = Field(min_length=1, max_length=200)
    note: str = Field(default="", max_length=5_000, description="free text; may hold line breaks")
    members: list[str] = Field(json_schema_extra={"minItems": 1, "uniqueItems": True})
    metric: str | None = None


@dataclass(frozen=True)
class EnsembleDetailContext:
    record: AssessmentRecord
    ensemble: EnsembleRecord
    estimate: EnsembleResult  # for the saved members on the saved metric
    models_kept: bool  # every member has kept fitted fold winners: the prefit model file can be made
    colours: dict[str, str]
    estimate_json: str


def ensemble_detail_context(read: EnsembleRead) -> EnsembleDetailContext:
    ensemble, record = read.ensemble, read.assessment.record
    estimate = ensemble_estimate(read.assessment, ensemble.members, metric=ensemble.metric)
    counts = read.assessment.fitted_model_counts()
    return EnsembleDetailContext(record=record, ensemble=ensemble, estimate=estimate,
                                 models_kept=all(counts.get(member) for member in ensemble.members),
                                 colours=family_colours([family.name for family in record.families]),
                                 estimate_json=json.dumps(context_json(estimate)))


@router.get("/ensembles/{eid}", name="ensemble_detail", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def ensemble_detail(request: Request, read: EnsembleDep):
    context = ensemble_detail_context(read)
    return request.app.state.templates.TemplateResponse(request, "ensemble_detail.html", {"page": context})


@router.post("/api/assessments/{uuid}/ensembles/preview", name="ensemble_preview", response_model=EnsembleEstimate,
            responses=error_responses(404, 422))
def preview(reader: ReaderDep, body: PreviewRequest):
    """Score the ensemble of ``members`` on every outer fold of every repeat from the stored predictions."""
    return context_json(ensemble_estimate(reader, body.members, metric=body.metric, rope=body.rope))


@router.post("/api/assessments/{uuid}/ensembles", status_code=201, name="save_ensemble", response_model=Ensemble,
            responses=error_responses(404, 422))
def save(request: Request, uuid: str, body: SaveRequest):
    """Save a named ensemble with its members, a note and its estimate (in one transaction)."""
    # One connection writing from the start: the estimate is made from what the ensemble is saved beside.
    with StoreReader.open(request.app.state.engine, write=True) as store:
        reader = assessment_or_404(store, uuid)
        estimate = ensemble_estimate(reader, body.members, metric=body.metric)
        try:
            ensemble = reader.save_ensemble(name=body.name, note=body.note, members=body.members,
                                            voting=estimate.voting, metric=estimate.metric,
                                            estimate_mean=plain(estimate.mean), estimate_sd=plain(estimate.sd))
        except ValueError as error:
            raise HTTPException(422, str(error)) from None
    return JSONResponse(_ensemble_json(request, ensemble), status_code=201)


@router.get("/api/assessments/{uuid}/ensembles", name="assessment_ensembles", response_model=list[Ensemble],
            responses={200: {"content": {"text/csv": {"schema": {"type": "string"}}},
                             "description": "the saved ensembles, as JSON or (format=csv) one CSV row per member"},
                       **error_responses(404, 422)})
def listed(request: Request, reader: ReaderDep, format: str = Query("json", pattern="^(json|csv)$")):
    """The assessment's saved ensembles; as CSV, one row per ensemble and member."""
    if format == "csv":
        return Response(to_csv(reader.ensemble_members()), media_type="text/csv", headers={
            "content-disposition": f'attachment; filename="{reader.uuid}-ensembles.csv"'})
    return [_ensemble_json(request, ensemble) for ensemble in reader.ensembles()]


@router.get("/api/ensembles/{eid}", name="ensemble_detail_json", response_model=EnsembleWithEstimate,
            responses=error_responses(404))
def ensemble_detail_json(request: Request, read: EnsembleDep):
    """A saved ensemble with its estimate recomputed from the stored predictions."""
    page = ensemble_detail_context(read)
    return _ensemble_json(request, page.ensemble) | {"estimate": context_json(page.estimate),
                                                     "models_kept": page.models_kept}


@router.delete("/api/ensembles/{eid}", status_code=204, name="delete_ensemble", response_class=Response,
               responses=error_responses(404))
def delete(request: Request, eid: str):
    if not delete_ensemble(request.app.state.engine, eid):
        raise refusal(404, f"no ensemble {eid!r} in this store", loc=["path", "eid"])
    return Response(status_code=204)


@router.get("/api/ensembles/{eid}/spec", name="ensemble_spec", response_class=Response,
            responses={200: {"content": {"application/json": {"schema": {"type": "object"}}},
                             "description": "a JSON file: the members' families, estimator classes and parameters"},
                       **error_responses(404)})
def spec(read: EnsembleDep):
    """The members as plain JSON (family, estimator class path, parameters): no foldwise needed to read it."""
    from foldwise.ensemble import ensemble_spec  # scikit-learn loads only when an ensemble is exported

    body = ensemble_spec(read.assessment.record, read.ensemble)
    return Response(json.dumps(body, indent=2), media_type="application/json", headers={
        "content-disposition": f'attachment; filename="ensemble-{read.ensemble.id}.json"'})


@router.get("/api/ensembles/{eid}/model", name="ensemble_model", response_class=Response,
            responses={200: {"content": {"application/octet-stream": {"schema": {"type": "string",
                                                                                 "format": "binary"}}},
                             "description": "a skops file of the kept fold winners, averaged"},
                       **error_responses(404, 409, 422)})
def model(read: EnsembleDep):
    """A skops file of the kept fold winners of the members, averaged, ready to predict."""
    import skops.io

    from foldwise.ensemble import UntrustedTypes, prefit_ensemble

    ensemble = read.ensemble
    try:
        models = read.assessment.fitted_models(ensemble.members)
        fitted = prefit_ensemble(read.assessment.record, ensemble, models)
    except LookupError as error:
        raise HTTPException(409, str(error)) from None
    except (UntrustedTypes, ValueError) as error:
        raise HTTPException(422, str(error)) from None
    return Response(skops.io.dumps(fitted), media_type="application/octet-stream", headers={
        "content-disposition": f'attachment; filename="ensemble-{ensemble.id}.skops"'})


def _ensemble_json(request: Request, ensemble: EnsembleRecord) -> dict:
    fields = {name: plain(value) for name, value in vars(ensemble).items()}
    return fields | {"url": str(request.url_for("ensemble_detail", eid=ensemble.id)),
                     "spec_url": str(request.url_for("ensemble_spec", eid=ensemble.id)),
                     "model_url": str(request.url_for("ensemble_model", eid=ensemble.id))}
