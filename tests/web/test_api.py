"""The JSON API through FastAPI's TestClient, each app around its own SQLite file."""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pandas as pd
from refusals import message as said  # tests/web/refusals.py: pytest puts this folder on sys.path

from foldwise.payload import AssessmentPayload


def _push(client, payload: AssessmentPayload):
    return client.post("/api/assessments", content=payload.model_dump_json(),
                       headers={"content-type": "application/json"})


def test_push_is_idempotent_on_the_uuid(client, small_assessment):
    first = _push(client, small_assessment.payload)
    assert first.status_code == 201, first.text
    assert first.json()["created"] is True
    again = _push(client, small_assessment.payload)
    assert again.status_code == 200
    assert again.json()["created"] is False
    listed = client.get("/api/assessments").json()
    assert [row["uuid"] for row in listed] == [small_assessment.uuid]


def test_assessment_reads_back_with_its_design_and_estimate(client, small_assessment):
    _push(client, small_assessment.payload)
    body = client.get(f"/api/assessments/{small_assessment.uuid}").json()
    assert body["design_text"] == "3 outer × 3 inner"
    assert [f["name"] for f in body["families"]] == ["logistic", "tree"]
    estimate = small_assessment.nested_estimate
    assert np.isclose(body["nested_estimate"]["mean"], estimate.mean, rtol=0, atol=1e-12)
    assert np.isclose(body["nested_estimate"]["sd"], estimate.sd, rtol=0, atol=1e-12)
    assert (body["nested_estimate"]["n"], body["nested_estimate"]["n_failed"]) == (3, 0)
    assert body["fingerprint"] == small_assessment.payload.fingerprint()


def test_scores_json_and_csv_match_the_runner(client, small_assessment):
    _push(client, small_assessment.payload)
    uuid = small_assessment.uuid
    inner = pd.DataFrame(client.get(f"/api/assessments/{uuid}/scores", params={"level": "inner"}).json())
    expected = small_assessment.inner_scores
    assert len(inner) == len(expected)
    np.testing.assert_array_equal(inner["score"].to_numpy(float), expected["score"].to_numpy(float))
    response = client.get(f"/api/assessments/{uuid}/scores", params={"level": "outer", "format": "csv"})
    assert response.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(response.text)))
    outer = small_assessment.outer_scores
    assert len(rows) == len(outer)
    assert [float(row["score"]) for row in rows] == outer["score"].tolist()
    assert json.loads(rows[0]["params"]) == outer["params"].iloc[0]


def test_winners_match_the_runner(client, small_assessment):
    _push(client, small_assessment.payload)
    served = pd.DataFrame(client.get(f"/api/assessments/{small_assessment.uuid}/winners").json())
    expected = small_assessment.winners
    assert served["config"].tolist() == expected["config"].tolist()
    np.testing.assert_allclose(served["optimism"], expected["optimism"], rtol=0, atol=1e-15)
    family = client.get(f"/api/assessments/{small_assessment.uuid}/winners", params={"level": "family"}).json()
    assert len(family) == 3 * 2  # outer folds × families


def test_invalid_payload_gets_422_naming_the_field(client, small_assessment):
    body = json.loads(small_assessment.payload.model_dump_json())
    body["inner_scores"]["config"][3] = 99
    response = client.post("/api/assessments", json=body)
    assert response.status_code == 422
    message = json.dumps(response.json()["detail"])
    assert "inner_scores.config[3]" in message
    assert client.get("/api/assessments").json() == []

    del body["design"]
    response = client.post("/api/assessments", json=body)
    assert response.status_code == 422
    assert ["body", "design"] in [entry["loc"] for entry in response.json()["detail"]]


def test_unknown_assessment_and_metric(client, small_assessment):
    assert client.get("/api/assessments/nope").status_code == 404
    _push(client, small_assessment.payload)
    response = client.get(f"/api/assessments/{small_assessment.uuid}/winners", params={"metric": "r2"})
    assert response.status_code == 422
    assert "roc_auc" in said(response)


def test_health_and_schema_are_served(client):
    assert client.get("/healthz").json() == {"status": "ok"}
    schema = client.get("/api/openapi.json").json()
    assert "AssessmentPayload" in schema["components"]["schemas"]
    assert client.get("/docs").status_code == 404  # the interactive docs would need a CDN


def test_plotly_is_served_locally(client):
    response = client.get("/static/vendor/plotly.min.js")
    assert response.status_code == 200
    assert len(response.content) > 1_000_000


def test_csv_cells_a_spreadsheet_would_run_are_neutralised(client):
    # A family named like a formula; spreadsheets run cells starting with =, +, - or @ (OWASP's advice on
    # CSV injection: prefix such cells with a single quote).
    from sklearn.datasets import load_iris
    from sklearn.tree import DecisionTreeClassifier

    import foldwise

    X, y = load_iris(return_X_y=True)
    assessment = foldwise.nested_cv({"=HYPERLINK(\"http://x\")": (DecisionTreeClassifier(random_state=0),
                                                                   {"max_depth": [1, 2]})},
                                    X, y, outer=3, inner=2, n_jobs=1, progress=False, name="@risky")
    assert _push(client, assessment.payload).status_code == 201
    text = client.get(f"/api/assessments/{assessment.uuid}/scores", params={"format": "csv"}).text
    rows = list(csv.DictReader(io.StringIO(text)))
    assert rows[0]["family"] == "'=HYPERLINK(\"http://x\")"
    assert rows[0]["config"].startswith("'=")
    assert float(rows[0]["score"]) == assessment.outer_scores["score"].iloc[0]  # numbers stay numbers
