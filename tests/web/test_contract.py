"""The API's contract, route by route: one refusal shape, 405 with Allow, a 500 that names its request,
the schema's declarations, and CSV cells a spreadsheet cannot turn into formulas."""

from __future__ import annotations

import base64
import csv
import io
import logging

import pytest
from fastapi.testclient import TestClient
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path

from foldwise.settings import Settings
from foldwise.web.app import create_app


def _push(client, assessment):
    return client.post("/api/assessments", content=assessment.payload.packed_json(),
                       headers={"content-type": "application/json"})


def test_an_unexpected_exception_is_a_500_naming_a_request_id_the_log_names(tmp_path, caplog):
    app = create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config"))

    def broken():
        raise RuntimeError("a bug")

    app.add_api_route("/api/broken", broken)
    app.add_api_route("/broken", broken)
    with TestClient(app, raise_server_exceptions=False) as client, caplog.at_level(logging.ERROR, "foldwise.web"):
        answer = client.get("/api/broken")
        page = client.get("/broken", headers={"accept": "text/html"})
    assert answer.status_code == 500 and answer.headers["content-type"] == "application/json"
    request_id = answer.json()["request_id"]
    assert request_id in message(answer) and answer.headers["x-request-id"] == request_id
    assert page.status_code == 500 and page.headers["content-type"].startswith("text/html")
    assert page.headers["x-request-id"] in page.text
    assert page.headers["content-security-policy"]  # inside the guard: the same headers as any answer
    logged = [record for record in caplog.records if "a bug" in (record.exc_text or str(record.exc_info))]
    assert {request_id, page.headers["x-request-id"]} <= {record.args[0] for record in logged}


def test_an_unknown_method_is_405_with_every_method_of_the_path_before_any_key(tmp_path):
    app = create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config"))
    with TestClient(app) as client:  # no key: a write would be 401, but the method is wrong first
        refused = client.delete("/api/assessments")
        assert refused.status_code == 405 and refused.headers["allow"] == "GET, OPTIONS, POST"
        assert "DELETE" in message(refused) and refused.json()["detail"][0]["type"] == "method_not_allowed"
        options = client.options("/api/assessments")
        assert options.status_code == 204 and options.headers["allow"] == "GET, OPTIONS, POST"
        assert client.put("/api/ensembles/abc").headers["allow"] == "DELETE, GET, OPTIONS"
        assert client.post("/assessments/abc/ranking").headers["allow"] == "GET, OPTIONS"
        assert client.get("/no/such/page").status_code == 404
        key_needed = client.post("/api/assessments", json={})
        assert key_needed.status_code == 401 and key_needed.headers["www-authenticate"].startswith("Bearer")
        assert key_needed.json()["detail"][0]["loc"] == ["header", "authorization"]


@pytest.mark.parametrize("dtype", [["float64"], {"name": "float64"}, 64, None])
def test_a_packed_column_whose_dtype_is_not_a_string_gets_a_422_at_its_path(client, small_assessment, dtype):
    body = small_assessment.payload.model_dump(mode="json")
    body["outer_scores"]["score"] = {"dtype": dtype, "data": base64.b64encode(b"\0" * 8).decode()}
    refused = client.post("/api/assessments", json=body)
    assert refused.status_code == 422, refused.text
    assert any(entry["loc"][:3] == ["body", "outer_scores", "score"] for entry in refused.json()["detail"])
    assert "dtype" in message(refused)


def test_compare_with_empty_ids_is_a_422_naming_them(client):
    refused = client.get("/api/compare", params={"x": "", "y": ""})
    assert refused.status_code == 422
    assert {tuple(entry["loc"]) for entry in refused.json()["detail"]} == {("query", "x"), ("query", "y")}


def test_every_refusal_has_the_one_shape(client, small_assessment):
    assert _push(client, small_assessment).status_code == 201
    uuid = small_assessment.uuid
    for refused, loc in [(client.get("/api/assessments/not-a-uuid"), ["path", "uuid"]),
                         (client.get(f"/api/assessments/{uuid}/winners", params={"metric": "r2"}),
                          ["query", "metric"]),
                         (client.get(f"/api/assessments/{uuid}/ranking", params={"metric": "r2"}),
                          ["query", "metric"]),
                         (client.post("/api/share-links", json={"path": "https://elsewhere"}), ["body", "path"])]:
        assert refused.json()["detail"][0]["loc"] == loc, refused.text
        message(refused)
    page = client.get("/assessments/not-a-uuid", headers={"accept": "text/html"})
    assert page.status_code == 404 and "not-a-uuid" in page.text


@pytest.mark.parametrize("field", ["family", "metric", "name", "dataset", "config id"])
def test_a_name_with_a_control_character_is_refused_at_push(client, small_assessment, field):
    body = small_assessment.payload.model_dump(mode="json")
    bad = "knn\r=cmd|' /C calc'!A0"
    if field == "family":
        old = body["families"][0]["name"]
        body["families"][0]["name"] = bad
        for config in body["configurations"]:
            config["family"] = bad if config["family"] == old else config["family"]
        where = ["body", "families", 0, "name"]
    elif field == "metric":
        body["design"]["metrics"][1] = "accuracy\n=1+1"
        where = ["body", "design", "metrics", 1]
    elif field == "config id":
        body["configurations"][0]["id"] = bad
        where = ["body", "configurations", 0, "id"]
    else:
        body[field] = bad
        where = ["body", field]
    refused = client.post("/api/assessments", json=body)
    assert refused.status_code == 422, refused.text
    assert where in [entry["loc"] for entry in refused.json()["detail"]]
    assert "control character" in message(refused)
    assert client.get("/api/assessments").json() == []


def test_csv_cells_are_neutralised_after_every_line_break_and_quoted(client, small_assessment):
    assert _push(client, small_assessment).status_code == 201
    uuid, member = small_assessment.uuid, small_assessment.payload.configurations[0].id
    note = "picked by hand\r=HYPERLINK(\"http://x\")\n+1\r\n@SUM(A1)\n-2, \"quoted\""
    saved = client.post(f"/api/assessments/{uuid}/ensembles", json={"name": "=first", "note": note,
                                                                     "members": [member]})
    assert saved.status_code == 201, saved.text
    exported = client.get(f"/api/assessments/{uuid}/ensembles", params={"format": "csv"})
    rows = list(csv.reader(io.StringIO(exported.text, newline="")))  # Python's csv module as the reader
    header, cells = rows[0], rows[1:]
    assert len(cells) == 1 and len(cells[0]) == len(header)  # the note's breaks and comma split nothing
    for cell in cells[0]:
        for line in cell.replace("\r\n", "\n").replace("\r", "\n").split("\n"):
            assert not line.startswith(("=", "+", "-", "@", "\t")), (cell, line)
    by_column = dict(zip(header, cells[0], strict=True))
    assert by_column["ensemble"] == "'=first"
    assert by_column["note"] == "picked by hand\r'=HYPERLINK(\"http://x\")\n'+1\r\n'@SUM(A1)\n'-2, \"quoted\""
    # every text cell is quoted in the file itself, so no reader splits one
    assert '"picked by hand' in exported.text


def test_the_schema_declares_what_the_server_answers(client):
    schema = client.get("/api/openapi.json").json()
    paths = schema["paths"]
    assert schema["components"]["securitySchemes"]["key"] == {**schema["components"]["securitySchemes"]["key"],
                                                             "type": "http", "scheme": "bearer"}
    for path, item in paths.items():
        for method, operation in item.items():
            responses = operation["responses"]
            for status, declared in responses.items():
                if status.startswith("4"):
                    assert declared["content"]["application/json"]["schema"] == {
                        "$ref": "#/components/schemas/ErrorBody"}, (method, path, status)
            ok = responses.get("200") or responses.get("201") or responses.get("204")
            content = ok.get("content", {})
            if "application/json" in content:  # a JSON answer has a body schema that says something
                assert content["application/json"]["schema"] not in ({}, {"type": "object"}) or \
                    path.endswith("/spec"), (method, path)
            writes = method != "get" and not path.endswith("/preview")
            assert (operation.get("security") == [{"key": []}]) is writes, (method, path)
            if writes:
                assert {"401", "403", "413"} <= set(responses), (method, path)
    assert "text/html" in paths["/assessments/{uuid}"]["get"]["responses"]["200"]["content"]
    assert "text/html" in paths["/assessments/{uuid}"]["get"]["responses"]["404"]["content"]
    assert "text/csv" in paths["/api/assessments/{uuid}/scores"]["get"]["responses"]["200"]["content"]
    assert {"409", "422"} <= set(paths["/api/assessments"]["post"]["responses"])
    packed = schema["components"]["schemas"]
    assert any(["int32", "int64"] == item.get("properties", {}).get("dtype", {}).get("enum")
               for item in _walk(packed)), "the packed column's dtype is declared with its allowed values"
    members = paths["/api/assessments/{uuid}/ensembles/preview"]["post"]["requestBody"]["content"]
    assert members["application/json"]["schema"]["$ref"].endswith("PreviewRequest")
    assert packed["PreviewRequest"]["properties"]["members"]["minItems"] == 1
    # A page's dataclass named like a payload model would split that name into "-Input" and "-Output" and
    # rename the payload's own schema under a client's feet.
    assert not [name for name in packed if name.endswith(("-Input", "-Output"))]
    assert "FoldChoice" in packed and "AssessmentPayload" in packed


def _walk(value):
    if isinstance(value, dict):
        yield value
        for item in value.values():
            yield from _walk(item)
    elif isinstance(value, list):
        for item in value:
            yield from _walk(item)
