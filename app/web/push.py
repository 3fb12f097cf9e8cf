"""The push route's way in: a packed body, or JSON read by pydantic from its bytes.

Read as FastAPI reads any body (``json.loads`` into Python objects, then validated), an assessment of
600,000 inner scores spends about twice as long before the store sees it; a packed body
(``foldwise.wire``) spares both sides the base64 text of its predictions too. Either body is validated
once: a refusal is raised from that one validation as the usual 422 naming the JSON path of the
problem. A body of another type takes FastAPI's own way, which refuses it (one validation too).
"""

from __future__ import annotations

import json

from fastapi import BackgroundTasks, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from fastapi.routing import APIRoute
from pydantic import ValidationError

from foldwise.payload import AssessmentPayload
from foldwise.store import UuidConflict, checkpoint, insert_assessment
from foldwise.web.errors import unreadable_reason
from foldwise.wire import CONTENT_TYPE, PackedBodyError, read_packed_body

OPENAPI = {"requestBody": {"content": {CONTENT_TYPE: {
    "schema": {"type": "string", "format": "binary"},
    "description": "the packed body of foldwise.wire: the JSON header, then the prediction blocks"}}}}


class PushRoute(APIRoute):
    def get_route_handler(self):
        usual = super().get_route_handler()

        async def handler(request: Request) -> Response:
            kind = request.headers.get("content-type", "").split(";")[0].strip().lower()
            if kind == CONTENT_TYPE:
                payload = await run_in_threadpool(_from_packed, await _body_in_one_buffer(request))
            elif kind == "application/json":
                payload = await run_in_threadpool(_from_json, await request.body())
            else:
                return await usual(request)
            background = BackgroundTasks()
            response = await run_in_threadpool(stored, request, payload, background)
            response.background = background
            return response

        return handler


async def _body_in_one_buffer(request: Request) -> bytes | memoryview:
    """The body, its pieces copied as they arrive into one buffer of the declared length, handed on read-only.

    ``request.body()`` keeps every piece and joins them at the end: for a push of 160 MB that took from
    two to four times as long as the transfer itself here. A body without Content-Length (chunked) has
    already been read whole by the guard (``security.Guard``).
    """
    length = request.headers.get("content-length", "")
    if not length.isdigit():
        return await request.body()
    buffer = memoryview(bytearray(int(length)))
    filled = 0
    async for piece in request.stream():
        end = filled + len(piece)
        if end > len(buffer):  # the HTTP server holds a client to its Content-Length; this is a last guard
            raise RequestValidationError([{"loc": ("body",), "type": "packed_body",
                                           "msg": f"the body runs past its Content-Length of {length} bytes"}])
        buffer[filled:end] = piece
        filled = end
    return buffer[:filled].toreadonly()


def stored(request: Request, payload: AssessmentPayload, background: BackgroundTasks) -> JSONResponse:
    """Store ``payload`` and answer once it is committed; copying SQLite's write-ahead log into the
    database file follows the answer, so the client does not wait for a second write of every page."""
    engine = request.app.state.engine
    try:
        created = insert_assessment(engine, payload, defer_checkpoint=True)
    except UuidConflict as conflict:  # a uuid names one assessment: other content under it is refused
        return JSONResponse({"detail": [{"loc": ["body", "uuid"], "msg": str(conflict), "type": "uuid_conflict"}]},
                            status_code=409)
    background.add_task(checkpoint, engine)
    body = {"uuid": str(payload.uuid), "created": created,
            "url": str(request.url_for("assessment_detail", uuid=str(payload.uuid)))}
    return JSONResponse(body, status_code=201 if created else 200)


def _from_json(body: bytes) -> AssessmentPayload:
    """The payload validated once, by pydantic from the bytes; a refusal is the 422 of any other body."""
    try:
        return AssessmentPayload.model_validate_json(body)
    except ValidationError as error:
        problems = error.errors(include_url=False, include_input=False)
    if not body:
        raise RequestValidationError([{"loc": ("body",), "msg": "Field required", "type": "missing"}])
    if any(problem["type"] == "json_invalid" for problem in problems):
        # Nothing was validated: pydantic's reader stopped before. Where does the standard library's?
        try:
            document = json.loads(body)
        except json.JSONDecodeError as error:
            raise RequestValidationError([{"loc": ("body", error.pos), "msg": "JSON decode error",
                                           "type": "json_invalid"}]) from None
        except (UnicodeDecodeError, RecursionError) as error:
            raise RequestValidationError([{"loc": ("body",), "type": "json_invalid", "msg": (
                f"the body is not JSON this server can read ({unreadable_reason(error)}); send UTF-8 JSON")}]
            ) from None
        # JSON past pydantic's nesting limit, which the standard library reads: validated from that.
        try:
            return AssessmentPayload.model_validate(document)
        except ValidationError as error:
            problems = error.errors(include_url=False, include_input=False)
    raise RequestValidationError([{"loc": ("body", *problem["loc"]), "msg": problem["msg"], "type": problem["type"]}
                                  for problem in problems])


def _from_packed(body: bytes | memoryview) -> AssessmentPayload:
    try:
        return read_packed_body(body)
    except ValidationError as error:
        raise RequestValidationError([{"loc": ("body", *entry["loc"]), "msg": entry["msg"], "type": entry["type"]}
                                      for entry in error.errors(include_url=False, include_input=False)]) from None
    except PackedBodyError as error:
        raise RequestValidationError([{"loc": ("body",), "msg": str(error), "type": "packed_body"}]) from None
