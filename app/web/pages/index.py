"""The index: every stored assessment, newest first, filtered by dataset or name."""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise.store import ensemble_counts, list_assessments
from foldwise.web.errors import error_responses
from foldwise.web.formatting import design_text
from foldwise.web.pages.live_runs import running_summaries
from foldwise.web.serialise import records

router = APIRouter()


@dataclass(frozen=True)
class IndexContext:
    assessments: list[dict]
    dataset: str
    name: str
    total: int


def index_context(engine, *, dataset: str | None, name: str | None) -> IndexContext:
    rows = records(list_assessments(engine, dataset=dataset or None, name=name or None))
    counts = ensemble_counts(engine)
    for row in rows:
        row["design"] = design_text(row["n_outer_folds"], row["n_inner_folds"], row["n_repeats"])
        row["n_ensembles"] = counts.get(row["uuid"], 0)
    total = len(rows) if not (dataset or name) else len(list_assessments(engine))
    return IndexContext(rows, dataset or "", name or "", total)


@router.get("/", name="index", response_class=HTMLResponse,
            responses=error_responses(422, html=True))
def index(request: Request, dataset: str | None = None, name: str | None = None):
    context = index_context(request.app.state.engine, dataset=dataset, name=name)
    return request.app.state.templates.TemplateResponse(request, "index.html", {
        "page": context, "running": running_summaries(request)})
