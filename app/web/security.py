"""Who may read and write, from where, how much, and the headers that keep a browser safe.

One ASGI middleware, in front of every route:

- a method the path does not take gets 405 naming those it does in ``Allow`` (``OPTIONS`` lists them),
  before anything else is asked of the request;
- a body larger than the limit gets 413 before the app reads it;
- a request that changes the store needs a write key; with reads restricted (any address other than
  loopback, or when asked), every page and API call needs a read or write key;
- a key arrives as ``Authorization: Bearer``, as the ``foldwise_key`` cookie, or once as ``?key=`` on a
  link, which is turned into an HttpOnly, SameSite=Strict cookie and redirected to the same URL without
  it, so the key does not linger in history or screenshots;
- a state-changing request that names an Origin must come from the dashboard's own origin (the
  SameSite cookie already keeps other sites' forms from carrying the key);
- every response carries a strict Content-Security-Policy and its companions.

Its refusals have the one shape of every refusal (``foldwise.web.errors``), located in the header or body.
"""

from __future__ import annotations

import re
from urllib.parse import urlencode

from starlette.datastructures import Headers
from starlette.requests import HTTPConnection
from starlette.responses import JSONResponse, RedirectResponse, Response

from foldwise.keys import KeyFile
from foldwise.web.errors import KINDS, entry
from foldwise.web.methods import MethodTable, allow_header

COOKIE = "foldwise_key"
_OPEN = re.compile(r"^/(healthz|static/|vendor/|favicon)")
# POSTs that compute but store nothing: any reader may make them.
_READ_ONLY_POSTS = re.compile(r"^/api/assessments/[^/]+/ensembles/preview$")
_SAFE_METHODS = {"GET", "HEAD", "OPTIONS"}
_CHALLENGE = {"www-authenticate": 'Bearer realm="foldwise"'}  # how to send a key (RFC 6750)
_COOKIE_SECONDS = 30 * 24 * 3600
_HEADERS = [
    (b"content-security-policy",
     b"default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; "
     b"font-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; form-action 'self'; "
     b"frame-ancestors 'none'"),
    (b"x-content-type-options", b"nosniff"),
    (b"x-frame-options", b"DENY"),
    (b"referrer-policy", b"no-referrer"),
    (b"cross-origin-opener-policy", b"same-origin"),
]


class Guard:
    def __init__(self, app, *, keys: KeyFile, reads_need_key: bool, max_body_bytes: int, methods: MethodTable):
        self.app, self.keys, self.methods = app, keys, methods
        self.reads_need_key, self.max_body_bytes = reads_need_key, max_body_bytes

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        send = _with_headers(send)
        request = HTTPConnection(scope)
        headers, method, path = request.headers, scope["method"], scope["path"]

        allowed = self.methods.allowed(path)
        if allowed is not None and method not in allowed:
            return await _reply(scope, receive, send, 405, f"{path} takes {allow_header(allowed)}, not {method}",
                                loc=["method"], headers={"allow": allow_header(allowed)})
        if allowed is not None and method == "OPTIONS":
            return await Response(status_code=204, headers={"allow": allow_header(allowed)})(scope, receive, send)
        length = headers.get("content-length", "")
        if length.isdigit() and int(length) > self.max_body_bytes:
            return await _reply(scope, receive, send, 413, f"the request body has {int(length)} bytes; this server "
                                f"takes at most {self.max_body_bytes} (FOLDWISE_MAX_BODY_MB)", loc=["body"])
        if _OPEN.match(path):
            return await self.app(scope, receive, send)

        offered = request.query_params.get("key")
        if offered is not None and method == "GET":
            return await self._trade_for_cookie(scope, receive, send, offered)

        key = self.keys.find(_bearer(headers) or request.cookies.get(COOKIE))
        # What the visitor may do, for the pages: a Save form only for a write key (request.state.key_kind).
        scope.setdefault("state", {})["key_kind"] = key.kind if key else None
        writes = method not in _SAFE_METHODS and not _READ_ONLY_POSTS.match(path)
        if method not in _SAFE_METHODS and not _same_origin(headers, scope):
            return await _reply(scope, receive, send, 403, "cross-origin request refused: state-changing requests "
                                "must come from this dashboard's own pages", loc=["header", "origin"])
        if writes and (key is None or key.kind != "write"):
            return await _reply(scope, receive, send, 401, "this request changes the store and needs a write key: "
                                "send 'Authorization: Bearer <key>' (see `foldwise keys show`)",
                                loc=["header", "authorization"], headers=_CHALLENGE)
        if self.reads_need_key and key is None:
            return await _reply(scope, receive, send, 401, "this dashboard needs a key: open the share link you "
                                "were given, or send 'Authorization: Bearer <key>'", loc=["header", "authorization"],
                                headers=_CHALLENGE)
        if method not in _SAFE_METHODS and not length.isdigit():
            body = await _read_at_most(receive, self.max_body_bytes)
            if body is None:
                return await _reply(scope, receive, send, 413, f"the request body is over this server's limit of "
                                    f"{self.max_body_bytes} bytes (FOLDWISE_MAX_BODY_MB)", loc=["body"])
            receive = _replay(body, receive)
        return await self.app(scope, receive, send)

    async def _trade_for_cookie(self, scope, receive, send, offered: str) -> None:
        if self.keys.find(offered) is None:
            return await _reply(scope, receive, send, 401, "this link's key is not valid (it may have been revoked)",
                                loc=["query", "key"], headers=_CHALLENGE)
        rest = urlencode([(name, value) for name, value in HTTPConnection(scope).query_params.multi_items()
                          if name != "key"])
        response = RedirectResponse(scope["path"] + (f"?{rest}" if rest else ""), status_code=303,
                                    headers={"cache-control": "no-store"})
        response.set_cookie(COOKIE, offered, max_age=_COOKIE_SECONDS, path="/", httponly=True, samesite="strict")
        await response(scope, receive, send)


async def _read_at_most(receive, limit: int) -> bytes | None:
    """A body sent without Content-Length (chunked), read whole unless it passes the limit."""
    chunks, seen = [], 0
    while True:
        message = await receive()
        if message["type"] != "http.request":
            return b"".join(chunks)
        chunks.append(message.get("body", b""))
        seen += len(chunks[-1])
        if seen > limit:
            return None
        if not message.get("more_body", False):
            return b"".join(chunks)


def _replay(body: bytes, original):
    sent = False

    async def receive():
        nonlocal sent
        if sent:  # after the body, wait for the real disconnect
            return await original()
        sent = True
        return {"type": "http.request", "body": body, "more_body": False}

    return receive


def _with_headers(send):
    async def sending(message):
        if message["type"] == "http.response.start":
            names = {name.lower() for name, _ in message.get("headers", [])}
            message = {**message, "headers": [*message.get("headers", []),
                                              *[(n, v) for n, v in _HEADERS if n not in names]]}
        await send(message)

    return sending


async def _reply(scope, receive, send, status: int, msg: str, *, loc: list[str], headers=None) -> None:
    response = JSONResponse({"detail": [entry(msg, loc=loc, type=KINDS[status])]}, status_code=status,
                            headers=headers)
    await response(scope, receive, send)


def _bearer(headers: Headers) -> str | None:
    value = headers.get("authorization", "")
    return value[7:].strip() if value.lower().startswith("bearer ") else None


def _same_origin(headers: Headers, scope) -> bool:
    origin = headers.get("origin")
    if origin is None:  # not sent by a browser page (scripts, the push client): the key decides
        return True
    host = headers.get("host", "")
    return origin in (f"{scope.get('scheme', 'http')}://{host}", f"http://{host}", f"https://{host}")


def needs_write_key(path: str, method: str) -> bool:
    return method not in _SAFE_METHODS and not _READ_ONLY_POSTS.match(path)


def guard_statuses(path: str, method: str) -> list[int]:
    """The refusals the guard may give on a route, for the OpenAPI schema: every page and API call can meet
    a key it does not take (a revoked link, reads restricted), a state-changing one another site's page
    or a body over the limit."""
    if _OPEN.match(path):
        return []
    return [401] if method in _SAFE_METHODS else [401, 403, 413]
