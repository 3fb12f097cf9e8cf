"""Score columns packed for the wire: one base64 block of little-endian numbers per column.

A column of 600,000 scores written as decimal text costs Python's ``json.loads`` over a second to
read back, and pydantic as long again to check number by number; packed, it is decoded in
milliseconds and its type is known from its ``dtype``. A packed column is the JSON object
``{"dtype": "float64", "data": "<base64>"}``; in a float column NaN stands for null (a failed fit).
Both forms are accepted everywhere; ``model_dump_json(context=PACKED)`` writes the packed one.
"""

from __future__ import annotations

import base64
import binascii
from typing import Annotated, Any

import numpy as np
from pydantic import PlainSerializer, SerializationInfo, WithJsonSchema, WrapValidator

PACKED = {"packed": True}  # the serialisation context that packs score columns

_INT_TYPES = {"int32": "<i4", "int64": "<i8"}
_FLOAT_TYPES = {"float64": "<f8"}


def _unpack(value: dict, dtypes: dict[str, str]) -> np.ndarray:
    if set(value) != {"dtype", "data"}:
        raise ValueError(f"a packed column holds exactly the keys 'dtype' and 'data', received {sorted(value)}")
    dtype, data = value["dtype"], value["data"]
    if dtype not in dtypes:
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


def _schema(item: dict) -> WithJsonSchema:
    packed = {"type": "object", "required": ["dtype", "data"], "additionalProperties": False,
              "properties": {"dtype": {"type": "string"}, "data": {"type": "string", "contentEncoding": "base64"}}}
    return WithJsonSchema({"anyOf": [{"type": "array", "items": item}, packed]})


def _pack_ints(values: list[int], info: SerializationInfo) -> list | dict[str, str]:
    return _pack(values, "int32", info)  # positions and fold numbers of a valid payload fit in int32


def _pack_floats(values: list[float | None], info: SerializationInfo) -> list | dict[str, str]:
    return _pack(values, "float64", info)


IntColumn = Annotated[list[int], WrapValidator(_ints), PlainSerializer(_pack_ints),
                      _schema({"type": "integer"})]
FloatColumn = Annotated[list[float | None], WrapValidator(_floats), PlainSerializer(_pack_floats),
                        _schema({"anyOf": [{"type": "number"}, {"type": "null"}]})]
