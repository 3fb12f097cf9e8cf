"""One shape for every refusal, and a server error that names its request.

Every 4xx answer, whoever gives it (FastAPI's validation, a handler, the security guard), is
``{"detail": [{"loc": [...], "msg": "...", "type": "..."}]}``: ``loc`` is where the problem lies
(``["query", "metric"]``, ``["body", "members"]``, ``["header", "authorization"]``; empty when it is the
request as a whole), ``msg`` says what is wrong and what would work. An unexpected exception is logged
with a request id and answered with a 500 naming that id, so a report can be matched with the log.
"""

from __future__ import annotations

import json
import logging
import secrets
from collections.abc import Sequence

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from foldwise.store.lookup import AssessmentNotFound

log = logging.getLogger("foldwise.web")

# What kind of refusal a status is, for the ``type`` of an entry that a handler did not name.
KINDS = {400: "bad_request", 401: "key_required", 403: "forbidden", 404: "not_found", 405: "method_not_allowed",
         409: "conflict", 413: "too_large", 415: "unsupported_media_type", 422: "invalid", 500: "server_error"}


class ErrorEntry(BaseModel):
    loc: list[str | int] = Field(description="where the problem lies: 'path', 'query', 'header' or 'body' and "
                                             "the name or JSON path in it; empty for the request as a whole")
    msg: str = Field(description="what is wrong, and what would work")
    type: str = Field(description="the kind of problem, e.g. not_found, key_required, missing, json_invalid")


class ErrorBody(BaseModel):
    """The body of every refusal (4xx) and of a server error (500, which adds its request id)."""

    detail: list[ErrorEntry] = Field(min_length=1)
    request_id: str | None = Field(default=None, description="a server error's id, as the server's log names it")


def entry(msg: str, *, loc: Sequence[str | int] = (), type: str) -> dict:
    return {"loc": list(loc), "msg": msg, "type": type}


def refusal(status: int, msg: str, *, loc: Sequence[str | int] = (), type: str | None = None) -> HTTPException:
    """An HTTPException whose detail is already in the one shape, naming where the problem lies."""
    return HTTPException(status, [entry(msg, loc=loc, type=type or KINDS.get(status, "error"))])


def error_responses(*statuses: int, html: bool = False) -> dict[int, dict]:
    """OpenAPI declarations of refusals a route may give; an HTML page also answers them as its error page."""
    content = {"application/json": {"schema": {"$ref": "#/components/schemas/ErrorBody"}}}
    if html:
        content["text/html"] = {"schema": {"type": "string"}}
    return {status: {"description": _DESCRIPTIONS[status], "content": content} for status in statuses}


_DESCRIPTIONS = {
    401: "a key is needed: the write key for a change, any key when reads are restricted",
    403: "a state-changing request from another site's page",
    404: "nothing by that id in this store",
    409: "the request conflicts with what is stored",
    413: "the body is larger than this server takes",
    422: "a parameter or the body is not what this route takes",
    500: "an unexpected server error, named by its request id in the body and the server's log",
}


def _entries(status: int, detail, method: str) -> list[dict]:
    if isinstance(detail, list) and detail and all(isinstance(item, dict) and "msg" in item for item in detail):
        return detail
    # A handler that raised with a plain message: the problem lies in what the request sent.
    where = ["query"] if status == 422 and method in ("GET", "HEAD") else ["body"] if status == 422 else []
    return [entry(str(detail), loc=where, type=KINDS.get(status, "error"))]


def _wants_page(request: Request) -> bool:
    return not request.url.path.startswith("/api") and "text/html" in request.headers.get("accept", "")


def install(app: FastAPI, templates) -> None:
    """The refusal handlers and the last resort for unexpected exceptions."""

    def page(request: Request, status: int, message: str, headers=None):
        return templates.TemplateResponse(request, "error.html", {"status": status, "message": message},
                                          status_code=status, headers=headers)

    @app.exception_handler(RequestValidationError)
    async def invalid(request: Request, error: RequestValidationError):
        # Name where the problem is and what is wrong, without echoing a large body back.
        detail = [entry(e.get("msg", ""), loc=e.get("loc", ()), type=e.get("type", "")) for e in error.errors()]
        if _wants_page(request):
            return page(request, 422, "; ".join(_located(item) for item in detail))
        return JSONResponse({"detail": detail}, status_code=422)

    @app.exception_handler(AssessmentNotFound)
    async def gone(request: Request, error: AssessmentNotFound):
        # An assessment deleted between finding it and reading it, wherever a read noticed: a 404.
        return await http_error(request, refusal(404, str(error), loc=["path", "uuid"]))

    @app.exception_handler(StarletteHTTPException)
    async def http_error(request: Request, error: StarletteHTTPException):
        cause = error.__cause__
        if error.status_code == 400 and cause is not None:
            # FastAPI's answer to a JSON body json.loads could not read: a 422 naming the body, as for
            # any other body that is not the JSON the route takes.
            return JSONResponse({"detail": [entry(f"the body is not JSON this server can read "
                                                  f"({unreadable_reason(cause)}); send UTF-8 JSON", loc=["body"],
                                                  type="json_invalid")]}, status_code=422)
        detail = _entries(error.status_code, error.detail, request.method)
        headers = getattr(error, "headers", None)
        if _wants_page(request):
            return page(request, error.status_code, "; ".join(item["msg"] for item in detail), headers)
        return JSONResponse({"detail": detail}, status_code=error.status_code, headers=headers)

    app.add_middleware(ServerErrors, page=page)


def unreadable_reason(cause: BaseException) -> str:
    """Why a body could not be read as JSON, from the kind of exception the reading raised."""
    if isinstance(cause, UnicodeDecodeError):
        return f"byte {cause.start} is not UTF-8"
    if isinstance(cause, RecursionError):
        return "arrays or objects nest too deeply"
    if isinstance(cause, json.JSONDecodeError):
        return f"{cause.msg} at character {cause.pos}"
    return f"{type(cause).__name__} while reading it"


def _located(item: dict) -> str:
    where = ".".join(str(part) for part in item["loc"])
    return f"{where}: {item['msg']}" if where else item["msg"]


class ServerErrors:
    """Answers an exception no handler expected with a 500 naming a request id, which the log names too.

    Inside the security guard, so the answer carries the same headers as any other.
    """

    def __init__(self, app, *, page):
        self.app, self.page = app, page

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        started = False

        async def sending(message):
            nonlocal started
            started = started or message["type"] == "http.response.start"
            await send(message)

        try:
            await self.app(scope, receive, sending)
        except Exception:
            request_id = secrets.token_hex(8)
            log.exception("request %s failed: %s %s", request_id, scope["method"], scope["path"])
            if started:  # the answer is under way: nothing left to do but drop the connection
                raise
            message = (f"the server failed on this request; its log names it as request {request_id} "
                       "(please quote the id when you report it)")
            request = Request(scope)
            if _wants_page(request):
                response = self.page(request, 500, message)
            else:
                response = JSONResponse({"detail": [entry(message, type="server_error")],
                                         "request_id": request_id}, status_code=500)
            response.headers["x-request-id"] = request_id
            await response(scope, receive, send)
