"""The request's reader of the store, the assessment a URL names (or a 404), and the metric it asks for.

Every route that reads the store takes one ``StoreReader`` (``StoreDep``) or, when its path names an
assessment, that assessment's reader (``ReaderDep``): one connection and one snapshot per request,
the assessment found once, a 404 in the one refusal shape when it is not there.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Annotated
from uuid import UUID

from fastapi import Depends, Request

from foldwise.store import AssessmentReader, AssessmentRecord, EnsembleRecord, StoreReader
from foldwise.web.errors import refusal


def store_reader(request: Request) -> Iterator[StoreReader]:
    """One connection in one read transaction for the whole request, closed after the answer is made."""
    with StoreReader.open(request.app.state.engine) as store:
        yield store


StoreDep = Annotated[StoreReader, Depends(store_reader)]


def assessment_or_404(store: StoreReader, uuid: str, *, loc=("path", "uuid")) -> AssessmentReader:
    try:
        UUID(uuid)
    except ValueError:
        raise refusal(404, f"no assessment {uuid!r}: assessment ids are uuids", loc=loc) from None
    found = store.assessment(uuid)
    if found is None:
        raise refusal(404, f"no assessment {uuid!r} in this store", loc=loc)
    return found


def assessment_reader(uuid: str, store: StoreDep) -> AssessmentReader:
    return assessment_or_404(store, uuid)


ReaderDep = Annotated[AssessmentReader, Depends(assessment_reader)]


@dataclass(frozen=True)
class EnsembleRead:
    """A saved ensemble and the reader of its assessment."""

    ensemble: EnsembleRecord
    assessment: AssessmentReader


def ensemble_read(eid: str, store: StoreDep) -> EnsembleRead:
    ensemble = store.ensemble(eid)
    if ensemble is None:
        raise refusal(404, f"no ensemble {eid!r} in this store: ensemble ids are uuids, listed on the "
                           f"assessment page and at /api/assessments/{{uuid}}/ensembles", loc=["path", "eid"])
    return EnsembleRead(ensemble, store.require(ensemble.assessment_uuid))


EnsembleDep = Annotated[EnsembleRead, Depends(ensemble_read)]


def metric_or_422(record: AssessmentRecord, metric: str | None, *, loc=("query", "metric")) -> str:
    metrics = record.design.metrics
    metric = metric or record.design.selection_metric
    if metric not in metrics:
        raise refusal(422, f"metric {metric!r} was not recorded in this assessment; choose one of "
                           f"{', '.join(metrics)}", loc=loc)
    return metric
