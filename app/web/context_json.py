"""A page's context as JSON for scripts: the numbers a person sees, without the chart drawings."""

from __future__ import annotations

import dataclasses

from pydantic import BaseModel

from foldwise.store import AssessmentRecord
from foldwise.web.serialise import plain


def context_json(context) -> dict:
    """Every field of a page's context dataclass, JSON-safe (NaN as null); ``*_figure(s)`` fields left out.

    The assessment record shrinks to what names it (uuid, name, dataset, design), since the full
    record is at ``/api/assessments/{uuid}``.
    """
    return {field.name: _json(getattr(context, field.name)) for field in dataclasses.fields(context)
            if not field.name.endswith(("_figure", "_figures"))}


def _json(value):
    if isinstance(value, AssessmentRecord):
        return {"uuid": value.uuid, "name": value.name, "dataset": value.dataset,
                "design": value.design.model_dump(mode="json")}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return context_json(value)
    if isinstance(value, BaseModel):
        return value.model_dump(mode="json")
    if isinstance(value, dict):
        return {str(key): _json(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_json(item) for item in value]
    return plain(value)
