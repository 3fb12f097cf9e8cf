"""Whether a client takes gzip, by the rules of Accept-Encoding, and pages compressed on that answer."""

from __future__ import annotations

from starlette.middleware.gzip import GZipMiddleware


def accepts_gzip(header: str) -> bool:
    """Whether an Accept-Encoding header (RFC 9110, 12.5.3) takes gzip: named, or by ``*``, with q > 0."""
    weights = {}
    for item in header.split(","):
        coding, *parameters = [part.strip() for part in item.split(";")]
        weight = 1.0
        for parameter in parameters:
            key, _, value = parameter.partition("=")
            if key.strip().lower() == "q":
                try:
                    weight = float(value)
                except ValueError:
                    weight = 0.0
        if coding:
            weights[coding.lower()] = weight
    return weights.get("gzip", weights.get("x-gzip", weights.get("*", 0.0))) > 0


class Compressed:
    """Starlette's GZipMiddleware for the clients that accept gzip (it looks for the word alone, so it
    would compress for ``gzip;q=0`` too). Responses that arrive encoded, like static files, pass as they are."""

    def __init__(self, app, *, minimum_size: int):
        self.app, self.gzip = app, GZipMiddleware(app, minimum_size=minimum_size)

    async def __call__(self, scope, receive, send):
        if scope["type"] == "http":
            header = next((value.decode("latin-1") for name, value in scope["headers"]
                           if name == b"accept-encoding"), "")
            if accepts_gzip(header):
                return await self.gzip(scope, receive, send)
        return await self.app(scope, receive, send)
