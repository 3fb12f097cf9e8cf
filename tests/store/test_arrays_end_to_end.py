"""A score's way from the runner to the store and back: float64 arrays with NaN for a failed fit all along.

The runner's arrays are the reference: pushed as JSON lists (null for NaN), as a JSON document of packed
columns, as a packed body, or saved straight into a store, every score, fit time and score time reads back
from the store (the payload, the reader's frames, the frames of the payload read back) as the same
float64 bits, NaN where the runner had NaN. ``null`` and SQL's NULL are the boundaries' spellings of it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise import frames
from foldwise.client import save
from foldwise.store import db_url_from, make_engine, read_assessment
from foldwise.wire import CONTENT_TYPE, packed_body

FLOAT_COLUMNS = ("score", "fit_time", "score_time")
FORMS = ("json lists", "json packed", "packed body", "save")


@pytest.fixture(scope="module")
def failing_run():
    """A real nested CV in which one configuration fails every fit (C=-1 is refused by LogisticRegression),
    so its inner and outer scores are NaN; the others score as usual."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [1.0, -1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}
    with pytest.warns(RuntimeWarning, match="fits failed and were recorded with NaN scores"):
        return foldwise.nested_cv(space, X[::3], y[::3], outer=3, inner=2, scoring=["roc_auc", "accuracy"],
                                  n_jobs=1, progress=False, name="one configuration failing",
                                  dataset="breast-cancer (scikit-learn bundled)")


def _same_bits(found, expected: np.ndarray, where: str) -> None:
    found = np.asarray(found)
    assert found.dtype == np.float64, f"{where}: {found.dtype}"
    assert np.array_equal(found, expected, equal_nan=True), where  # NaN where NaN
    known = ~np.isnan(expected)
    # Bit for bit where a number is: 0.0 and -0.0, or two neighbouring floats, are told apart.
    assert np.array_equal(found[known].view(np.uint64), expected[known].view(np.uint64)), where


def _store(form: str, payload, path, open_client) -> None:
    if form == "save":
        assert save(payload, str(path))
        return
    body, kind = {"json lists": (payload.model_dump_json(), "application/json"),
                  "json packed": (payload.packed_json(), "application/json"),
                  "packed body": (b"".join(packed_body(payload)), CONTENT_TYPE)}[form]
    with open_client(f"sqlite:///{path}") as client:
        response = client.post("/api/assessments", content=body, headers={"content-type": kind})
        assert response.status_code == 201, response.text


def test_the_runner_keeps_scores_as_float64_arrays_with_nan_for_a_failed_fit(failing_run):
    for block in (failing_run.payload.inner_scores, failing_run.payload.outer_scores):
        for name in FLOAT_COLUMNS:
            column = getattr(block, name)
            assert isinstance(column, np.ndarray) and column.dtype == np.float64 and not column.flags.writeable
        assert np.isnan(block.score).any() and not np.isnan(block.score).all()  # failures to carry along


@pytest.mark.parametrize("form", FORMS)
def test_scores_read_back_from_the_store_are_the_runners_bits_with_nan_where_nan(failing_run, form, tmp_path,
                                                                                 open_client):
    payload, path = failing_run.payload, tmp_path / "store.db"
    _store(form, payload, path, open_client)
    engine = make_engine(db_url_from(str(path)))
    try:
        with read_assessment(engine, str(payload.uuid)) as reader:
            stored, inner, outer = reader.payload(), reader.inner(), reader.outer()
    finally:
        engine.dispose()
    for block, read in (("inner_scores", inner), ("outer_scores", outer)):
        expected = getattr(payload, block)
        from_payload = (frames.inner_frame if block == "inner_scores" else frames.outer_frame)(stored)
        for name in FLOAT_COLUMNS:
            _same_bits(getattr(getattr(stored, block), name), getattr(expected, name), f"{form}: payload {name}")
            _same_bits(read[name], getattr(expected, name), f"{form}: reader's {block} {name}")
            _same_bits(from_payload[name], getattr(expected, name), f"{form}: frame of {block} {name}")
    assert stored.inner_scores == payload.inner_scores and stored.outer_scores == payload.outer_scores


def test_json_says_null_where_the_arrays_say_nan(failing_run):
    """The one place a failed fit is null: the JSON the payload is written as (and read from)."""
    payload = failing_run.payload
    document = json.loads(payload.inner_scores.model_dump_json())
    for name in FLOAT_COLUMNS:
        written = document[name]
        expected = getattr(payload.inner_scores, name)
        assert [value is None for value in written] == np.isnan(expected).tolist()
        assert [value for value in written if value is not None] == expected[~np.isnan(expected)].tolist()
