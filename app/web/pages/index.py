"""The index: every stored assessment, newest first, filtered by dataset or name."""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise.store import StoreReader
from foldwise.web.errors import error_responses
from foldwise.web.formatting import design_text
from foldwise.web.listing import ListedAssessment, listed_fields
from foldwise.web.lookup import StoreDep
from foldwise.web.pages.live_runs import running_summaries

router = APIRouter()


@dataclass(frozen=True)
class IndexRow(ListedAssessment):
    design: str  # outer × inner (× repeats), as the page writes it
    n_ensembles: int  # saved ensembles of this assessment


@dataclass(frozen=True)
class IndexContext:
    assessments: list[IndexRow]  # newest first
    dataset: str
    name: str
    total: int


def index_context(store: StoreReader, *, dataset: str | None, name: str | None) -> IndexContext:
    counts = store.ensemble_counts()
    rows = [IndexRow(**listed_fields(row), n_ensembles=counts.get(row["uuid"], 0),
                     design=design_text(row["n_outer_folds"], row["n_inner_folds"], row["n_repeats"]))
            for row in store.assessments(dataset=dataset or None, name=name or None).to_dict(orient="records")]
    total = len(rows) if not (dataset or name) else store.count_assessments()
    return IndexContext(rows, dataset or "", name or "", total)


@router.get("/", name="index", response_class=HTMLResponse,
            responses=error_responses(422, html=True))
def index(request: Request, store: StoreDep, dataset: str | None = None, name: str | None = None):
    context = index_context(store, dataset=dataset, name=name)
    return request.app.state.templates.TemplateResponse(request, "index.html", {
        "page": context, "running": running_summaries(request, store)})
