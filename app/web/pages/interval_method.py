"""The page that says what the interval beside every nested estimate is, how it is computed and how well it covers."""

from __future__ import annotations

from fastapi import APIRouter, Request

from foldwise.definitions import HEADLINE_LEVEL, HEADLINE_METHOD

router = APIRouter()


@router.get("/methods/interval", name="interval_method", include_in_schema=False)
def interval_method(request: Request):
    return request.app.state.templates.TemplateResponse(
        request, "interval_method.html", {"level": HEADLINE_LEVEL, "method": HEADLINE_METHOD})
