"""The packed body of a push: the assessment's JSON, then its prediction blocks as raw bytes.

Sent as JSON, 30,000 blocks of float64 predictions become 160 MB of base64 text that the client
writes, the server reads into Python strings and decodes again: on a small machine most of the
time of a large push. Packed, the JSON header carries the scores (packed columns) and, for each
prediction, where its bytes lie in the tail that follows.

Layout, for ``Content-Type: application/x-foldwise-assessment``: the 8 bytes ``FOLDWISE``; the
length of the header as an unsigned 64-bit little-endian integer; the header, UTF-8 JSON of schema
version 2 whose predictions' ``data`` are ``{"offset": o, "size": n}`` into the tail; the tail, every
block one after another in payload order, nothing before, between or after.
"""

from __future__ import annotations

from foldwise.packed import TAIL, TailReader, TailWriter
from foldwise.payload import AssessmentPayload

CONTENT_TYPE = "application/x-foldwise-assessment"
MAGIC = b"FOLDWISE"
_PREFIX = len(MAGIC) + 8


class PackedBodyError(ValueError):
    """A packed body whose framing is wrong (before any field of the assessment could be read)."""


def packed_body(payload: AssessmentPayload) -> list[bytes]:
    """The packed body of ``payload``, in parts whose concatenation is the body."""
    tail = TailWriter()
    header = payload.packed_json(tail=tail)
    return [MAGIC, len(header).to_bytes(8, "little"), header, *tail.blocks]


def read_packed_body(body: bytes | memoryview) -> AssessmentPayload:
    """The assessment a packed body holds; ``pydantic.ValidationError`` for a bad assessment (locations
    as in the JSON header), ``PackedBodyError`` for bad framing."""
    view = memoryview(body)
    if len(body) < _PREFIX or view[:len(MAGIC)] != MAGIC:
        raise PackedBodyError(f"a packed body starts with {MAGIC.decode()} and the header's length; this one "
                              f"starts {bytes(view[:_PREFIX])!r}")
    size = int.from_bytes(view[len(MAGIC):_PREFIX], "little")
    if _PREFIX + size > len(body):
        raise PackedBodyError(f"the header is said to hold {size} bytes, but only {len(body) - _PREFIX} follow")
    tail = TailReader(view[_PREFIX + size:])
    payload = AssessmentPayload.model_validate_json(view[_PREFIX:_PREFIX + size].tobytes(),
                                                    context={TAIL: tail})
    if (problem := tail.untiled()) is not None:
        raise PackedBodyError(problem)
    return payload
