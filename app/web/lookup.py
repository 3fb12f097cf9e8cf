"""Finding the assessment a URL names, or answering 404 with what was asked for."""

from __future__ import annotations

from uuid import UUID

from fastapi import HTTPException

from foldwise.store import AssessmentRecord, get_assessment


def record_or_404(engine, uuid: str) -> AssessmentRecord:
    try:
        UUID(uuid)
    except ValueError:
        raise HTTPException(404, f"no assessment {uuid!r}: assessment ids are uuids") from None
    record = get_assessment(engine, uuid)
    if record is None:
        raise HTTPException(404, f"no assessment {uuid!r} in this store")
    return record


def metric_or_422(record: AssessmentRecord, metric: str | None) -> str:
    metrics = record.design.metrics
    metric = metric or record.design.selection_metric
    if metric not in metrics:
        raise HTTPException(422, f"metric {metric!r} was not recorded; choose one of {metrics}")
    return metric
