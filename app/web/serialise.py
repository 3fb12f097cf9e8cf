"""DataFrames to JSON records and CSV, the same for every endpoint."""

from __future__ import annotations

import csv
import io
import json
import math
import re

import numpy as np
import pandas as pd

_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
# A spreadsheet may start a new row, or a new cell, after a line break in a cell: a formula character
# right after one is neutralised as at the start of the cell.
_FORMULA_AFTER_BREAK = re.compile(r"([\r\n])(?=[=+\-@\t\r])")


def records(frame: pd.DataFrame) -> list[dict]:
    """Rows as dicts of plain Python values, NaN as None, timestamps as ISO 8601: the JSON boundary, the one
    place where a failed fit's NaN becomes null."""
    rows = frame.to_dict(orient="records")
    return [{column: plain(value) for column, value in row.items()} for row in rows]


def plain(value):
    """A value as JSON holds it: NaN and infinities as None, numpy numbers and arrays as Python's."""
    if isinstance(value, np.ndarray):
        return _plain_list(value.tolist())
    if isinstance(value, float | np.floating):
        value = float(value)
        return None if math.isnan(value) or math.isinf(value) else value
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    if value is pd.NaT or value is None:
        return None
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return value


def _plain_list(values: list) -> list:
    return [_plain_list(item) if isinstance(item, list) else plain(item) for item in values]


def to_csv(frame: pd.DataFrame) -> str:
    """CSV with params as JSON, and text cells that a spreadsheet would run as a formula neutralised."""
    frame = frame.copy()
    for column in frame.columns:
        # pandas 3 keeps text in a string dtype, older pandas as object: both may hold formulas.
        if pd.api.types.is_object_dtype(frame[column]) or pd.api.types.is_string_dtype(frame[column]):
            frame[column] = [_cell(value) for value in frame[column]]
    out = io.StringIO()
    # Every text cell quoted (numbers stay bare), so a comma, quote or line break in a name splits nothing.
    frame.to_csv(out, index=False, quoting=csv.QUOTE_NONNUMERIC, lineterminator="\r\n")
    return out.getvalue()


def _cell(value):
    if isinstance(value, dict | list):
        value = json.dumps(value, sort_keys=True)
    if not isinstance(value, str):
        return value
    value = _FORMULA_AFTER_BREAK.sub(r"\1'", value)
    return "'" + value if value.startswith(_FORMULA_STARTS) else value
