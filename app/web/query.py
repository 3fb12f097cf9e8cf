"""Query parameters several routes share, with the bounds the server checks written into the schema.

The handlers check these themselves, with messages that say what would work; the schema states the
same bounds so a client (or a schema-driven tester) knows them before asking.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Query

ROPE_TEXT = "half-width of the region of practical equivalence, in score units"
Rope = Annotated[float, Query(description=ROPE_TEXT,
                              json_schema_extra={"minimum": 0})]
FoldNumber = Annotated[int, Query(description="counted from 0", json_schema_extra={"minimum": 0})]
