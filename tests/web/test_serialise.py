"""The JSON boundary: where NaN (a failed fit, an undefined statistic) becomes null, and nowhere before."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd

from foldwise.web.serialise import plain, records


def test_an_array_becomes_python_numbers_with_none_for_nan_and_infinities():
    values = np.array([[0.5, np.nan, -0.0], [np.inf, -np.inf, 1e-300]])
    # The reference: a plain loop over the rows, as a JSON document would hold them.
    expected = [[None if math.isnan(v) or math.isinf(v) else float(v) for v in row] for row in values.tolist()]
    found = plain(values)
    assert found == expected
    assert json.loads(json.dumps(found, allow_nan=False)) == expected  # strict JSON, no NaN token
    assert plain(np.arange(3, dtype=np.int64)) == [0, 1, 2] and all(type(v) is int for v in plain(np.arange(3)))


def test_records_keep_numbers_and_say_null_where_the_frame_says_nan():
    frame = pd.DataFrame({"config": ["a", "b"], "score": [0.75, np.nan], "n": np.array([3, 4], dtype=np.int64)})
    assert records(frame) == [{"config": "a", "score": 0.75, "n": 3}, {"config": "b", "score": None, "n": 4}]
