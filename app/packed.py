"""Score columns packed for the wire: one base64 block of little-endian numbers per column.

A column of 600,000 scores written as decimal text costs Python's ``json.loads`` over a second to
read back, and pydantic as long again to check number by number; packed, it is decoded in
milliseconds and its type is known from its ``dtype``. A packed column is the JSON object
``{"dtype": "float64", "data": "<base64>"}``; in a float column NaN stands for null (a failed fit).
Both forms are accepted everywhere; ``model_dump_json(context=PACKED)`` writes the packed one.

In Python a column is what it is in the packed form: a read-only numpy array, int64, or float64 with
NaN for a failed fit, decoded straight from the packed bytes (no copy on a little-endian machine) or
made once from a list. ``null`` stands for a failed fit only in JSON: a list is read with null as NaN
and written with NaN as null (``nullable_list``; SQL's NULL likewise).

A prediction block (``Blob``) is bytes in memory: base64 text in a JSON document, or a reference
``{"offset", "size"}`` into the tail of a packed body (``foldwise.wire``), whose readers and writers
(``TailReader``, ``TailWriter``) travel in the validation or serialisation context.
"""

from __future__ import annotations

import base64
import binascii
from typing import Annotated, Any

import numpy as np
from pydantic import (
    GetPydanticSchema,
    PlainSerializer,
    SerializationInfo,
    ValidationInfo,
    WithJsonSchema,
    WrapValidator,
)
from pydantic_core import core_schema

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


def _int_column(value: Any, handler) -> np.ndarray:
    """An int64 column, read-only: from a packed column, an integer array, or a list of integers.

    Integers past int64 are kept as Python integers (an object array), so that the payload's reference
    checks refuse the row by its path as they refuse any other position out of range: no payload that
    passes them holds one.
    """
    if isinstance(value, dict):
        return _frozen(_unpack(value, _INT_TYPES), np.int64)
    if isinstance(value, np.ndarray):
        array = _one_dimensional(value, "iu", "integers")
        if array.dtype.kind == "u" and len(array) and array.max() > _INT64_MAX:
            return _frozen(array, object)
        return _frozen(array, np.int64)
    values = handler(value)  # pydantic's strict list of integers, refusing row by row
    try:
        return _frozen(np.array(values, dtype=np.int64), np.int64)
    except OverflowError:
        return _frozen(np.array(values, dtype=object), object)


def _float_column(value: Any, handler) -> np.ndarray:
    """A float64 column with NaN for a failed fit, read-only: from a packed column or a float array (NaN for
    a failed fit), or a list of numbers with null for a failed fit. No column holds an infinity."""
    kind = "a column"
    if isinstance(value, dict):
        array, kind = _unpack(value, _FLOAT_TYPES), "a packed column"
    elif isinstance(value, np.ndarray):
        array = _one_dimensional(value, "iuf", "numbers")
    else:
        # pydantic's strict list of numbers or nulls, refusing row by row; null becomes NaN. (A NaN or an
        # infinity in a list is refused by the payload's blocks, at their path: null alone says "failed".)
        return _frozen(np.array(handler(value), dtype=np.float64), np.float64)
    infinite = np.flatnonzero(np.isinf(array))
    if len(infinite):
        raise ValueError(f"value {infinite[0]} is {array[infinite[0]]}; {kind} uses NaN for a failed fit and "
                         "holds no infinities")
    return _frozen(array, np.float64)


def _one_dimensional(array: np.ndarray, kinds: str, what: str) -> np.ndarray:
    if array.ndim != 1 or array.dtype.kind not in kinds:
        raise ValueError(f"a column is a one-dimensional array of {what}, received a {array.ndim}-dimensional "
                         f"array of {array.dtype}")
    return array


def _frozen(array: np.ndarray, dtype: type) -> np.ndarray:
    """The column in native ``dtype``, read-only as the validated payload is. An array decoded from a packed
    column is used as it is (on a little-endian machine); another array is copied, so that the payload
    shares no memory its caller might change."""
    if array.base is None or not isinstance(array.base, bytes):
        array = array.astype(dtype)  # a copy
    else:
        array = array.astype(dtype, copy=False)
    array.flags.writeable = False
    return array


def _packing(info: SerializationInfo) -> bool:
    return bool(info.context and info.context.get("packed"))


def _pack(array: np.ndarray, dtype: str, info: SerializationInfo) -> np.ndarray | list | dict[str, str]:
    """Packed (with the ``PACKED`` context); a list with null for NaN in JSON, the only place null stands for
    a failed fit; in Python, a writable copy of the array (as ``model_dump`` gives new lists of lists)."""
    if _packing(info):
        little = array.astype((_INT_TYPES | _FLOAT_TYPES)[dtype], copy=False)
        return {"dtype": dtype, "data": base64.b64encode(little.tobytes()).decode("ascii")}
    if not info.mode_is_json():
        return np.array(array)
    return nullable_list(array)


def nullable_list(array: np.ndarray) -> list:
    """The column as JSON and SQL hold it: Python numbers, None (null, NULL) where the array holds NaN."""
    values = array.tolist()
    if array.dtype.kind == "f":
        for position in np.flatnonzero(np.isnan(array)).tolist():
            values[position] = None
    return values


def _column(item: Any, validate, dtype: str, dtypes: dict[str, str], item_schema: dict) -> Any:
    """A column typed as the numpy array it is in Python, validated from what JSON and Python send."""
    def schema(_source, handler) -> core_schema.CoreSchema:
        return core_schema.no_info_wrap_validator_function(
            validate, handler.generate_schema(list[item]),
            serialization=core_schema.plain_serializer_function_ser_schema(
                lambda array, info: _pack(array, dtype, info), info_arg=True))

    packed = {"type": "object", "required": ["dtype", "data"], "additionalProperties": False,
              "properties": {"dtype": {"type": "string", "enum": list(dtypes)},
                             "data": {"type": "string", "contentEncoding": "base64"}}}
    return Annotated[np.ndarray, GetPydanticSchema(schema),
                     WithJsonSchema({"anyOf": [{"type": "array", "items": item_schema}, packed]})]


_INT64_MAX = np.iinfo(np.int64).max

# positions and fold numbers of a valid payload fit in int32, so int columns travel packed as int32
IntColumn = _column(int, _int_column, "int32", _INT_TYPES, {"type": "integer"})
FloatColumn = _column(float | None, _float_column, "float64", _FLOAT_TYPES,
                      {"anyOf": [{"type": "number"}, {"type": "null"}]})


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
