"""Score columns packed for the wire: one base64 block of little-endian numbers per column.

A column of 600,000 scores written as decimal text costs Python's ``json.loads`` over a second to
read back, and pydantic as long again to check number by number; packed, it is decoded in
milliseconds and its type is known from its ``dtype``. A packed column is the JSON object
``{"dtype": "float64", "data": "<base64>"}``; in a float column NaN stands for null (a failed fit).
Both forms are accepted everywhere; ``model_dump_json(context=PACKED)`` writes the packed one.

A prediction block (``Blob``) is bytes in memory: base64 text in a JSON document, or a reference
``{"offset", "size"}`` into the tail of a packed body (``foldwise.wire``), whose readers and writers
(``TailReader``, ``TailWriter``) travel in the validation or serialisation context.
"""

from __future__ import annotations

import base64
import binascii
from typing import Annotated, Any

import numpy as np
from pydantic import PlainSerializer, SerializationInfo, ValidationInfo, WithJsonSchema, WrapValidator

PACKED = {"packed": True}  # the serialisation context that packs score columns
TAIL = "tail"  # context key: a TailWriter when writing a packed body, its tail (a memoryview) when reading

_INT_TYPES = {"int32": "<i4", "int64": "<i8"}
_FLOAT_TYPES = {"float64": "<f8"}


def _unpack(value: dict, dtypes: dict[str, str]) -> np.ndarray:
    if set(value) != {"dtype", "data"}:
        raise ValueError(f"a packed column holds exactly the keys 'dtype' and 'data', received {sorted(value)}")
    dtype, data = value["dtype"], value["data"]
    if not (isinstance(dtype, str) and dtype in dtypes):  # a list or an object is no dtype (nor hashable)
        raise ValueError(f"dtype {str(dtype)[:40]!r} is not one of {', '.join(dtypes)}")
    if not isinstance(data, str):
        raise ValueError(f"data must be base64 text, received {type(data).__name__}")
    try:
        raw = base64.b64decode(data, validate=True)
    except (binascii.Error, ValueError):
        raise ValueError(f"data is not base64 text (received {data[:40]!r}...)") from None
    itemsize = np.dtype(dtypes[dtype]).itemsize
    if len(raw) % itemsize:
        raise ValueError(f"data holds {len(raw)} bytes, not a whole number of {dtype} values "
                         f"({itemsize} bytes each)")
    return np.frombuffer(raw, dtype=dtypes[dtype])


def _ints(value: Any, handler) -> list[int]:
    if isinstance(value, dict):
        return _unpack(value, _INT_TYPES).tolist()
    return handler(value)


def _floats(value: Any, handler) -> list[float | None]:
    if not isinstance(value, dict):
        return handler(value)
    values = _unpack(value, _FLOAT_TYPES)
    infinite = np.flatnonzero(np.isinf(values))
    if len(infinite):
        raise ValueError(f"value {infinite[0]} is {values[infinite[0]]}; a packed column uses NaN for a "
                         "failed fit and holds no infinities")
    column = values.tolist()
    for position in np.flatnonzero(np.isnan(values)).tolist():
        column[position] = None
    return column


def _packing(info: SerializationInfo) -> bool:
    return bool(info.context and info.context.get("packed"))


def _pack(values: list, dtype: str, info: SerializationInfo) -> list | dict[str, str]:
    if not _packing(info):
        return values
    array = np.array(values, dtype=(_INT_TYPES | _FLOAT_TYPES)[dtype])  # None becomes NaN in a float column
    return {"dtype": dtype, "data": base64.b64encode(array.tobytes()).decode("ascii")}


def _schema(item: dict, dtypes: dict[str, str]) -> WithJsonSchema:
    packed = {"type": "object", "required": ["dtype", "data"], "additionalProperties": False,
              "properties": {"dtype": {"type": "string", "enum": list(dtypes)},
                             "data": {"type": "string", "contentEncoding": "base64"}}}
    return WithJsonSchema({"anyOf": [{"type": "array", "items": item}, packed]})


def _pack_ints(values: list[int], info: SerializationInfo) -> list | dict[str, str]:
    return _pack(values, "int32", info)  # positions and fold numbers of a valid payload fit in int32


def _pack_floats(values: list[float | None], info: SerializationInfo) -> list | dict[str, str]:
    return _pack(values, "float64", info)


IntColumn = Annotated[list[int], WrapValidator(_ints), PlainSerializer(_pack_ints),
                      _schema({"type": "integer"}, _INT_TYPES)]
FloatColumn = Annotated[list[float | None], WrapValidator(_floats), PlainSerializer(_pack_floats),
                        _schema({"anyOf": [{"type": "number"}, {"type": "null"}]}, _FLOAT_TYPES)]



class TailWriter:
    """Collects prediction blocks for the tail of a packed body, handing back where each one lies."""

    def __init__(self):
        self.blocks: list[bytes] = []
        self.size = 0

    def add(self, block: bytes) -> dict[str, int]:
        reference = {"offset": self.size, "size": len(block)}
        self.blocks.append(block)
        self.size += len(block)
        return reference


class TailReader:
    """Hands out the blocks of a packed body's tail by reference, noting which bytes were taken."""

    def __init__(self, tail: memoryview):
        self.tail, self.taken = tail, []

    def take(self, reference: dict) -> memoryview:
        """The block's bytes as a read-only view into the body: copying 30,000 blocks one by one took a
        quarter of a large push's reading, and a view holds no second copy of them in memory."""
        offset, size = reference.get("offset"), reference.get("size")
        # One test for the usual case (a body holds tens of thousands of blocks), the reasons after it.
        if not (len(reference) == 2 and type(offset) is int and type(size) is int and 0 <= offset
                and 0 <= size and offset + size <= len(self.tail)):
            raise ValueError(self._refusal(reference))
        self.taken.append((offset, size))
        return self.tail[offset:offset + size]

    def _refusal(self, reference: dict) -> str:
        offset, size = reference.get("offset"), reference.get("size")
        if set(reference) != {"offset", "size"}:
            return f"a block holds exactly the keys 'offset' and 'size', received {sorted(reference)}"
        if not all(type(n) is int and n >= 0 for n in (offset, size)):
            return f"offset and size must be whole numbers from 0, received {offset!r} and {size!r}"
        return f"bytes {offset}..{offset + size} lie past the end of the body's tail ({len(self.tail)} bytes)"

    def untiled(self) -> str | None:
        """Why the blocks taken do not cover the tail once each, one after another; None when they do."""
        end = 0
        for position, (offset, size) in enumerate(self.taken):
            if offset != end:
                return (f"predictions[{position}].data starts at byte {offset} of the tail, where byte {end} "
                        "was next: the blocks follow one another in payload order")
            end += size
        if end != len(self.tail):
            return f"the tail holds {len(self.tail)} bytes, the predictions' blocks {end}"
        return None


def _blob(value: Any, handler, info: ValidationInfo) -> bytes | memoryview:
    """A prediction block's bytes: base64 text in a JSON document, a reference into the tail of a packed
    body (``foldwise.wire``; a read-only view of the body's bytes, see ``TailReader.take``), or bytes as
    they are from Python."""
    if isinstance(value, dict):
        tail = (info.context or {}).get(TAIL)
        if not isinstance(tail, TailReader):
            raise ValueError("a reference {'offset', 'size'} into the tail of a packed body, but this is a "
                             "JSON document; send the block as base64 text")
        return tail.take(value)
    if isinstance(value, bytes | bytearray | memoryview):
        return bytes(value)
    if isinstance(value, str):
        try:
            return base64.b64decode(value, validate=False)  # as lenient as the JSON form always was
        except (binascii.Error, ValueError):
            raise ValueError(f"not base64 text (received {value[:40]!r}...)") from None
    return handler(value)  # pydantic's own refusal of anything else


def _blob_out(value: bytes, info: SerializationInfo) -> bytes | str | dict[str, int]:
    if not info.mode_is_json():
        return value
    tail = (info.context or {}).get(TAIL)
    return tail.add(value) if isinstance(tail, TailWriter) else base64.b64encode(value).decode("ascii")


Blob = Annotated[bytes, WrapValidator(_blob), PlainSerializer(_blob_out),
                 WithJsonSchema({"type": "string", "contentEncoding": "base64"})]
