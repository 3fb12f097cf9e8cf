"""Finding the assessment a URL names, or answering 404 with what was asked for."""

from __future__ import annotations

from uuid import UUID

from foldwise.store import AssessmentRecord, get_assessment
from foldwise.web.errors import refusal


def record_or_404(engine, uuid: str) -> AssessmentRecord:
    try:
        UUID(uuid)
    except ValueError:
        raise refusal(404, f"no assessment {uuid!r}: assessment ids are uuids", loc=["path", "uuid"]) from None
    record = get_assessment(engine, uuid)
    if record is None:
        raise refusal(404, f"no assessment {uuid!r} in this store", loc=["path", "uuid"])
    return record


def metric_or_422(record: AssessmentRecord, metric: str | None, *, loc=("query", "metric")) -> str:
    metrics = record.design.metrics
    metric = metric or record.design.selection_metric
    if metric not in metrics:
        raise refusal(422, f"metric {metric!r} was not recorded; choose one of {metrics}", loc=loc)
    return metric
