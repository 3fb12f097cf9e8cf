"""Packed score columns (schema version 2): the same assessment as the lists of version 1, and bad
packed columns refused with the path of the column."""

from __future__ import annotations

import base64
import json

import numpy as np
import pytest

from foldwise.payload import SCHEMA_VERSION, AssessmentPayload

JSON = {"content-type": "application/json"}
COLUMNS = {"inner_scores": ["repeat", "outer_fold", "inner_fold", "config", "metric", "score", "fit_time",
                            "score_time"],
           "outer_scores": ["repeat", "outer_fold", "config", "metric", "score", "fit_time", "score_time"]}


def _with_failed_fit(payload: AssessmentPayload) -> AssessmentPayload:
    """The payload with inner score 4 and outer fit time 2 null, as a failed fit leaves them, and its fold
    winners left out, so that they are chosen again from the inner scores."""
    fields = payload.model_dump()
    fields["inner_scores"]["score"][4] = np.nan
    fields["outer_scores"]["fit_time"][2] = np.nan
    fields["family_winners"] = fields["overall_winners"] = None
    return AssessmentPayload.model_validate(fields)


def _packed(values, dtype: str) -> dict:
    return {"dtype": dtype, "data": base64.b64encode(np.asarray(values, dtype=dtype).tobytes()).decode("ascii")}


def test_packed_columns_hold_the_little_endian_numbers_of_the_lists(small_assessment):
    payload = _with_failed_fit(small_assessment.payload)
    packed, lists = json.loads(payload.packed_json()), json.loads(payload.model_dump_json())
    for block, names in COLUMNS.items():
        for name in names:
            column = packed[block][name]
            dtype = {"float64": "<f8", "int32": "<i4"}[column["dtype"]]
            decoded = np.frombuffer(base64.b64decode(column["data"]), dtype=dtype)
            expected = np.array(lists[block][name], dtype=float)  # null becomes NaN, as the packed form keeps it
            np.testing.assert_array_equal(decoded, expected, err_msg=f"{block}.{name}")
    assert np.isnan(np.frombuffer(base64.b64decode(packed["inner_scores"]["score"]["data"]))[4])
    assert packed["schema_version"] == SCHEMA_VERSION == 2
    assert packed["predictions"] == lists["predictions"]  # only the score columns are packed
    assert [base64.b64decode(p["data"]) for p in packed["predictions"]] == [p.data for p in payload.predictions]


def test_a_packed_document_reads_back_as_the_same_assessment(small_assessment):
    payload = _with_failed_fit(small_assessment.payload)
    for again in (AssessmentPayload.model_validate_json(payload.packed_json()),
                  AssessmentPayload.model_validate(json.loads(payload.packed_json()))):
        assert again == payload
        assert np.isnan(again.inner_scores.score[4]) and np.isnan(again.outer_scores.fit_time[2])
        assert [p.data for p in again.predictions] == [p.data for p in payload.predictions]


def test_a_version_1_document_of_lists_is_still_stored(client, small_assessment):
    doc = json.loads(small_assessment.payload.model_dump_json()) | {"schema_version": 1}
    response = client.post("/api/assessments", content=json.dumps(doc), headers=JSON)
    assert response.status_code == 201, response.text
    scores = client.get(f"/api/assessments/{small_assessment.uuid}/scores", params={"level": "inner"}).json()
    assert [row["score"] for row in scores] == small_assessment.payload.inner_scores.score.tolist()


def test_packed_and_list_pushes_store_the_same_rows(open_client, tmp_path, small_assessment):
    stored = {}
    for form, body in (("packed", small_assessment.payload.packed_json()),
                       ("lists", small_assessment.payload.model_dump_json())):
        with open_client(f"sqlite:///{tmp_path / form}.db") as client:
            assert client.post("/api/assessments", content=body, headers=JSON).status_code == 201
            stored[form] = [client.get(f"/api/assessments/{small_assessment.uuid}/scores",
                                       params={"level": level}).json() for level in ("inner", "outer")]
    assert stored["packed"] == stored["lists"]


def _broken(small_assessment, block: str, name: str, column) -> bytes:
    doc = json.loads(small_assessment.payload.packed_json())
    doc[block][name] = column
    return json.dumps(doc).encode()


def _score_count(small_assessment) -> int:
    return len(small_assessment.payload.inner_scores)


BAD = {
    "unknown dtype": ("score", lambda n: _packed(np.zeros(n), "float32"), "dtype 'float32' is not one of float64"),
    "ints where floats go": ("score", lambda n: _packed(np.zeros(n), "int64"), "is not one of float64"),
    "not base64": ("fit_time", lambda n: {"dtype": "float64", "data": "!!!!"}, "data is not base64 text"),
    "a torn value": ("score", lambda n: {"dtype": "float64",
                                         "data": base64.b64encode(b"\0" * (8 * n - 3)).decode()},
                     "not a whole number of float64 values"),
    "an extra key": ("score", lambda n: _packed(np.zeros(n), "float64") | {"order": "C"},
                     "exactly the keys 'dtype' and 'data'"),
    "an infinity": ("score_time", lambda n: _packed(np.r_[np.zeros(n - 1), np.inf], "float64"),
                    "holds no infinities"),
    "one value short": ("score", lambda n: _packed(np.zeros(n - 1), "float64"), "columns differ in length"),
    "data not text": ("config", lambda n: {"dtype": "int32", "data": 12}, "data must be base64 text"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_a_bad_packed_column_is_refused_naming_its_path_and_nothing_is_stored(client, small_assessment, case):
    name, make, message = BAD[case]
    body = _broken(small_assessment, "inner_scores", name, make(_score_count(small_assessment)))
    response = client.post("/api/assessments", content=body, headers=JSON)
    assert response.status_code == 422, response.text
    detail = response.json()["detail"]
    text = " ".join(entry["msg"] for entry in detail)
    assert message in text
    assert any(entry["loc"][:3] == ["body", "inner_scores", name] or entry["loc"] == ["body", "inner_scores"]
               for entry in detail), detail
    assert client.get("/api/assessments").json() == []


def test_a_packed_reference_out_of_range_is_refused_naming_the_row(client, small_assessment):
    configs = np.array(small_assessment.payload.inner_scores.config)
    configs[3] = 99
    body = _broken(small_assessment, "inner_scores", "config", _packed(configs, "int32"))
    response = client.post("/api/assessments", content=body, headers=JSON)
    assert response.status_code == 422
    assert "inner_scores.config[3]: 99 is not a position in configurations" in response.text


def test_columns_are_read_only_float64_and_int64_arrays_from_every_form(small_assessment):
    payload = _with_failed_fit(small_assessment.payload)
    forms = {"packed": AssessmentPayload.model_validate_json(payload.packed_json()),
             "lists": AssessmentPayload.model_validate_json(payload.model_dump_json()),
             "arrays": AssessmentPayload.model_validate(payload.model_dump())}
    for form, again in forms.items():
        for block, names in COLUMNS.items():
            for name in names:
                column = getattr(getattr(again, block), name)
                expected = np.float64 if name in ("score", "fit_time", "score_time") else np.int64
                assert isinstance(column, np.ndarray) and column.dtype == expected, (form, block, name)
                assert not column.flags.writeable, (form, block, name)
        assert np.isnan(again.inner_scores.score[4]), form  # the failed fit, NaN in every form
    # Decoded from the packed bytes as they are, not copied number by number (a little-endian machine).
    assert isinstance(forms["packed"].inner_scores.score.base, bytes)


def test_an_array_given_is_copied_and_a_dump_can_be_changed_without_changing_the_payload(small_assessment):
    payload = small_assessment.payload
    fields = payload.model_dump()
    scores = fields["inner_scores"]["score"]
    again = AssessmentPayload.model_validate(fields)
    scores[0] = 0.123  # the caller's array, changed after validation
    assert again.inner_scores.score[0] == payload.inner_scores.score[0] != 0.123
    assert again == payload


def test_a_packed_column_is_json_null_where_the_array_is_nan(small_assessment):
    payload = _with_failed_fit(small_assessment.payload)
    lists = json.loads(payload.model_dump_json())
    assert lists["inner_scores"]["score"][4] is None and lists["outer_scores"]["fit_time"][2] is None
    # The reference: a plain loop over the array, NaN written as null.
    expected = [None if value != value else value for value in payload.inner_scores.score.tolist()]
    assert lists["inner_scores"]["score"] == expected


@pytest.mark.parametrize(("value", "message"), [(float("nan"), "score[2] is nan; use null for a failed fit"),
                                                 (10**400, "Input should be a valid number")])
def test_a_list_with_a_number_no_float_column_keeps_is_refused_naming_the_column(client, small_assessment,
                                                                                 value, message):
    doc = json.loads(small_assessment.payload.model_dump_json())
    doc["inner_scores"]["score"][2] = value
    response = client.post("/api/assessments", content=json.dumps(doc), headers=JSON)
    assert response.status_code == 422, response.text
    assert message in response.text and "inner_scores" in response.text
