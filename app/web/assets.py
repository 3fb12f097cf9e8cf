"""Static files and the bundled plotly.js under versioned URLs, compressed once, cached for a year.

A page links ``/static/<digest>/<name>`` (``static_url`` in templates), where the digest is the start of
the file's SHA-256: a browser keeps the file as long as it likes (``immutable``) and asks again only when
the content, and so the URL, changes. The gzip form is made on the first request and kept in memory,
so plotly.js (4.8 MB, 1.5 MB gzipped) is compressed once per process, not per request. The plain name
``/static/<name>`` keeps working, revalidated by its ETag.
"""

from __future__ import annotations

import gzip
import hashlib
import mimetypes
import threading
from functools import lru_cache
from pathlib import Path

from jinja2 import pass_context
from starlette.requests import Request
from starlette.responses import PlainTextResponse, Response

from foldwise.web.compression import accepts_gzip
from foldwise.web.resources import plotly_js, static_dir

_DIGEST_CHARS = 12
_YEAR = "public, max-age=31536000, immutable"
_REVALIDATE = "no-cache"
_COMPRESSIBLE = ("text/", "application/json", "application/javascript", "image/svg+xml")
_GZIP_LEVEL = 9  # as fast as level 6 on plotly.js here (0.57 vs 0.63 s), and paid once
_encoding_lock = threading.Lock()


class Assets:
    """The files a page may link: everything in static/, and plotly.js as ``vendor/plotly.min.js``."""

    def __init__(self, folder: Path, extra: dict[str, Path]):
        self._files = {path.relative_to(folder).as_posix(): path for path in sorted(folder.rglob("*"))
                       if path.is_file()}
        self._files.update(extra)

    def digest(self, name: str) -> str:
        path = self._files[name]
        stat = path.stat()  # a file edited in a checkout gets a new URL without a restart
        return _digest(path, stat.st_mtime_ns, stat.st_size)

    def versioned(self, name: str) -> str:
        """The path parameter of the ``static`` route for ``name``: ``<digest>/<name>``."""
        if name not in self._files:
            raise KeyError(f"no static asset {name!r}; known: {', '.join(sorted(self._files))}")
        return f"{self.digest(name)}/{name}"

    def respond(self, request: Request) -> Response:
        path = request.path_params["path"]
        digest, _, rest = path.partition("/")
        if rest in self._files and self.digest(rest) == digest:
            return self._answer(request, rest, _YEAR)
        if path in self._files:
            return self._answer(request, path, _REVALIDATE)
        if rest in self._files:
            return PlainTextResponse(f"{rest} has changed since this page was made: reload the page", 404)
        return PlainTextResponse(f"no static file {path}", 404)

    def _answer(self, request: Request, name: str, cache_control: str) -> Response:
        digest = self.digest(name)
        media_type = _media_type(name)
        plain, gzipped = _encoded(self._files[name], digest, media_type.startswith(_COMPRESSIBLE))
        use_gzip = gzipped is not None and accepts_gzip(request.headers.get("accept-encoding", ""))
        etag = f'"{digest}-gzip"' if use_gzip else f'"{digest}"'
        headers = {"cache-control": cache_control, "etag": etag, "vary": "Accept-Encoding"}
        if etag in _tags(request.headers.get("if-none-match", "")):
            return Response(status_code=304, headers=headers)
        if use_gzip:
            headers["content-encoding"] = "gzip"
        return Response(gzipped if use_gzip else plain, media_type=media_type, headers=headers)


def app_assets() -> Assets:
    return Assets(static_dir(), {"vendor/plotly.min.js": plotly_js()})


@pass_context
def static_url(context, name: str) -> str:
    """Jinja global: the versioned URL of a static asset, e.g. ``static_url('foldwise.css')``."""
    request = context["request"]
    return str(request.url_for("static", path=request.app.state.assets.versioned(name)))


@lru_cache(maxsize=256)
def _digest(path: Path, _mtime_ns: int, _size: int) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:_DIGEST_CHARS]


def _encoded(path: Path, digest: str, compressible: bool) -> tuple[bytes, bytes | None]:
    with _encoding_lock:  # two first requests at once compress once
        return _encode(path, digest, compressible)


@lru_cache(maxsize=64)
def _encode(path: Path, _digest: str, compressible: bool) -> tuple[bytes, bytes | None]:
    plain = path.read_bytes()
    if not compressible:
        return plain, None
    gzipped = gzip.compress(plain, _GZIP_LEVEL, mtime=0)
    return plain, gzipped if len(gzipped) < len(plain) else None


def _media_type(name: str) -> str:
    guessed = mimetypes.guess_type(name)[0] or "application/octet-stream"
    if guessed == "application/javascript":
        guessed = "text/javascript"  # RFC 9239
    return f"{guessed}; charset=utf-8" if guessed.startswith("text/") else guessed


def _tags(header: str) -> set[str]:
    return {tag.strip().removeprefix("W/") for tag in header.split(",") if tag.strip()}
