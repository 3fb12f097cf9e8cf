"""Which methods a path answers, read from the app's own OpenAPI schema.

The router alone answers a method it does not know with the methods of the first route whose path
matches, while one path may be served by several routes (``GET`` and ``POST /api/assessments``); and
the security guard, which stands in front of the router, would ask for a key first. The guard asks this
table instead: a known path with an unknown method gets 405 with every method the path takes in
``Allow``, and ``OPTIONS`` lists them.
"""

from __future__ import annotations

import re
from collections.abc import Callable

_PARAMETER = re.compile(r"\{[^}/]+\}")


class MethodTable:
    def __init__(self, schema: Callable[[], dict], *, extra: dict[str, set[str]]):
        self._schema, self._extra = schema, extra
        self._table: list[tuple[re.Pattern, frozenset[str]]] | None = None

    def allowed(self, path: str) -> frozenset[str] | None:
        """The methods ``path`` takes (with OPTIONS), or None for a path no documented route serves."""
        if self._table is None:  # built at the first request, once every route is registered
            self._table = self._build()
        methods: set[str] = set()
        for pattern, known in self._table:
            if pattern.fullmatch(path):
                methods |= known
        return frozenset(methods | {"OPTIONS"}) if methods else None

    def _build(self) -> list[tuple[re.Pattern, frozenset[str]]]:
        paths = {path: {method.upper() for method in item if method.lower() in _METHODS}
                 for path, item in self._schema().get("paths", {}).items()}
        for path, methods in self._extra.items():
            paths[path] = paths.get(path, set()) | methods
        return [(_pattern(path), frozenset(methods)) for path, methods in paths.items()]


_METHODS = {"get", "put", "post", "delete", "patch", "head", "options", "trace"}


def _pattern(path: str) -> re.Pattern:
    parts = _PARAMETER.split(path)
    return re.compile("[^/]+".join(re.escape(part) for part in parts))


def allow_header(methods: frozenset[str]) -> str:
    return ", ".join(sorted(methods))
