"""The OpenAPI schema as the server behaves: FastAPI's description of the routes, plus what stands in front
of them (the guard's refusals, the bearer key of the write routes) and the one shape of every refusal."""

from __future__ import annotations

from collections.abc import Callable

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from foldwise.web.errors import ErrorBody, error_responses
from foldwise.web.security import guard_statuses, needs_write_key

KEY = "key"  # the name of the security scheme
_FASTAPI_ERROR = "#/components/schemas/HTTPValidationError"


def openapi_of(app: FastAPI, *, reads_need_key: bool) -> Callable[[], dict]:
    """``app.openapi``: built once, at the first request for it (every route is registered by then)."""

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = _schema(app, reads_need_key=reads_need_key)
        return app.openapi_schema

    return openapi


def _schema(app: FastAPI, *, reads_need_key: bool) -> dict:
    schema = get_openapi(title=app.title, version=app.version, description=app.description, routes=app.routes)
    components = schema.setdefault("components", {})
    schemas = components.setdefault("schemas", {})
    error = ErrorBody.model_json_schema(ref_template="#/components/schemas/{model}")
    schemas.update(error.pop("$defs", {}))
    schemas["ErrorBody"] = error
    components["securitySchemes"] = {KEY: {
        "type": "http", "scheme": "bearer",
        "description": "a foldwise key (`foldwise keys show`): the write key for the routes that change the "
                       "store; any key for every route when the server restricts reads. The dashboard's pages "
                       "carry it as the foldwise_key cookie instead."}}
    for path, item in schema.get("paths", {}).items():
        for method, operation in item.items():
            _declare(operation, path, method.upper(), reads_need_key=reads_need_key)
    for unused in ("HTTPValidationError", "ValidationError"):
        schemas.pop(unused, None)
    return schema


def _declare(operation: dict, path: str, method: str, *, reads_need_key: bool) -> None:
    responses = operation["responses"]
    page = "text/html" in responses.get("200", {}).get("content", {})
    for status, declared in error_responses(*guard_statuses(path, method)).items():
        responses.setdefault(str(status), declared)
    for status, declared in responses.items():
        # FastAPI declares its own validation error shape; every refusal here has the one shape instead.
        content = declared.get("content", {})
        if content.get("application/json", {}).get("schema", {}).get("$ref") == _FASTAPI_ERROR:
            responses[status] = error_responses(int(status), html=page)[int(status)]
    if needs_write_key(path, method) or (reads_need_key and guard_statuses(path, method)):
        operation["security"] = [{KEY: []}]
