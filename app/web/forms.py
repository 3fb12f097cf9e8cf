"""Forms that keep your place: a value a page cannot use is shown beside its field, on the same page.

A page's GET form sends its fields in the query string. When building the page refuses one field (a
refusal located at ``["query", name]``, see ``foldwise.web.errors``), the page is built again with that
field at its default, and the template shows the visitor's value in the field with the message beside it.
Refusals of anything else (an assessment that is not stored) still give the error page, and a caller that
does not ask for HTML (a script) gets the refusal itself, as from the JSON routes.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TypeVar

from fastapi import HTTPException

from foldwise.web.errors import refusal

Built = TypeVar("Built")


@dataclass(frozen=True)
class FormState:
    values: dict[str, str] = field(default_factory=dict)  # each field as the visitor sent it
    errors: dict[str, str] = field(default_factory=dict)  # field name -> what is wrong and what would work
    status: int = 200  # the answer's status: the refusal's (404 for an id not stored, else 422), or 200


def keep_place(build: Callable[..., Built], sent: dict, defaults: dict) -> tuple[Built, FormState]:
    """``build(**fields)``, again with each refused field at its default until the page can be built.

    ``sent`` holds the fields as given (None: not given); ``defaults`` what a refused field falls back to.
    """
    errors: dict[str, str] = {}
    status = 200
    while True:
        fields = {name: defaults.get(name) if name in errors else value for name, value in sent.items()}
        try:
            return build(**fields), FormState({name: "" if v is None else str(v) for name, v in sent.items()},
                                              errors, status)
        except HTTPException as error:
            name, message = _refused_field(error)
            if name not in sent or name in errors or sent[name] is None and name not in defaults:
                raise
            errors[name] = message
            status = max(status, error.status_code if error.status_code in (404, 422) else 422)


def rope_from(text: str | None, *, default: float = 0.01) -> float:
    """The ROPE typed in a form: a finite number >= 0 in score units; empty means the default."""
    if text is None or not text.strip():
        return default
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value >= 0):
        raise refusal(422, f"the ROPE is a half-width in score units, a number of 0 or more (e.g. 0.01); "
                           f"got {text!r}", loc=["query", "rope"])
    return value


def _refused_field(error: HTTPException) -> tuple[str | None, str]:
    detail = error.detail
    if isinstance(detail, list) and len(detail) == 1 and isinstance(detail[0], dict):
        loc = detail[0].get("loc") or []
        if len(loc) == 2 and loc[0] == "query":
            return str(loc[1]), str(detail[0].get("msg", ""))
    return None, str(detail)


def form_page(request, template: str, build: Callable[..., Built], sent: dict, defaults: dict | None = None):
    """The page ``template`` filled by ``build(**sent)``, keeping its place (``keep_place``) when a field is
    refused: the template receives ``page`` and ``form``; the answer's status is the refusal's."""
    if "text/html" in request.headers.get("accept", ""):
        context, form = keep_place(build, sent, defaults or {})
    else:  # a script reading the page: the refusal itself, located at the field
        context, form = build(**sent), FormState()
    return request.app.state.templates.TemplateResponse(request, template, {"page": context, "form": form},
                                                        status_code=form.status)
