"""A page's context as JSON for scripts: the numbers a person sees, without the chart drawings."""

from __future__ import annotations

import dataclasses
import functools
import operator
import types
import typing
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, create_model

from foldwise.store import AssessmentRecord
from foldwise.web.metric_display import API_ORIENTATION
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


@functools.cache
def context_model(context_class: type) -> type[BaseModel]:
    """The response model of ``context_json(context)``: the dataclass's fields as JSON names their types,
    numbers nullable (NaN is null), the record as what names it, figures left out."""
    hints = typing.get_type_hints(context_class)
    fields = {field.name: (_json_type(hints[field.name]), _described(field.name))
              for field in dataclasses.fields(context_class) if not field.name.endswith(("_figure", "_figures"))}
    return create_model(context_class.__name__.removesuffix("Context") or context_class.__name__,
                        __config__=ConfigDict(extra="allow"), **fields)


def _described(name: str):
    # The metric of a page's answer says how every score in it is oriented (the page shows losses positive).
    return Field(..., description=API_ORIENTATION) if name == "metric" else ...


class _RecordRef(BaseModel):
    uuid: str
    name: str
    dataset: str | None
    design: dict[str, Any]


def _json_type(hint):
    if hint is AssessmentRecord:
        return _RecordRef
    if dataclasses.is_dataclass(hint):
        return context_model(hint)
    if hint is float:
        return float | None
    if hint is dict:
        return dict[str, Any]
    origin, arguments = typing.get_origin(hint), typing.get_args(hint)
    if origin in (types.UnionType, typing.Union):
        return functools.reduce(operator.or_, [_json_type(argument) for argument in arguments])
    if origin is list:
        return list[_json_type(arguments[0])]
    if origin is dict:
        return dict[arguments[0], _json_type(arguments[1])]
    return hint
