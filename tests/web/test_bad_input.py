"""Malformed pushes: never a 5xx, every rejection a 422 naming the field, nothing stored after one.

The generated half starts from the valid payload of a real nested CV and breaks it one mutation at a
time; Python's ``json.loads`` and ``AssessmentPayload.model_validate`` (not the server's way in, where
pydantic reads the bytes itself) judge independently whether the result is still a valid assessment.
"""

from __future__ import annotations

import base64
import copy
import json
import re
import time
from collections import Counter
from uuid import uuid4

import numpy as np
import pytest
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from foldwise.payload import AssessmentPayload
from foldwise.settings import Settings
from foldwise.web.app import create_app

JSON = {"content-type": "application/json"}
EXAMPLES = 600

_NASTY = [
    None, True, False, 0, -1, 1.5, -0.0, 5e-324, 1e308, float("nan"), float("inf"), float("-inf"),
    2**31 - 1, 2**31, 2**63 - 1, 2**63, -(2**63) - 1, 2**64, 10**30, -(10**30),
    "", "<script>alert(1)</script>", "a\x00b", "\ud800", "\udfff tail", "é✓🙂\u202e", "' OR 1=1 --",
    "%s%n{0}", "NaN", "x" * 5_000, [], {}, [[[]]], {"": None}, [None, "a", 1, 2.5],
]
_SCALARS = (st.none() | st.booleans() | st.integers() | st.floats(allow_nan=True, allow_infinity=True)
            | st.text(max_size=12))
_JSON_VALUES = st.recursive(_SCALARS, lambda inner: st.lists(inner, max_size=4)
                            | st.dictionaries(st.text(max_size=6), inner, max_size=4), max_leaves=8)
_DEPTHS = st.sampled_from([33, 100, 250, 600])
_TIMES = ["0001-01-01T00:00:00+14:00", "9999-12-31T23:59:59-14:00", "2024-02-30T00:00:00", "2024-01-01",
          "2024-01-01T00:00:00Z", "now", 0, -1, 2**40, 10**20, 1e300]
_UUIDS = ["not a uuid", "", 12345, None, "00000000-0000-0000-0000-00000000000", "{uuid}", "urn:uuid:{uuid}",
          "{upper}", "{hex}"]
_BASE64 = ["", "=", "abc", "!!!!", "é" * 8, "QUJD" * 3 + "\n", "AAAAAAAAAAA=", "\x00" * 4]


def _nested(depth: int) -> list:
    value: list = []
    for _ in range(depth):
        value = [value]
    return value


def _paths(node, path=()):
    """Every path below ``node``, as tuples of keys and list positions."""
    children = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
    for key, child in children:
        yield (*path, key)
        yield from _paths(child, (*path, key))


def _at(doc, path):
    for key in path:
        doc = doc[key]
    return doc


SCORE_BLOCKS = ["inner_scores", "outer_scores"]


# Each mutation changes ``doc`` in place (or returns raw body bytes) and names the top-level key it broke.

def _pick_path(data, doc, label):
    """A top-level key first, then a path under it, so that short keys are broken as often as long lists."""
    top = data.draw(st.sampled_from(sorted(doc)), label="top")
    return data.draw(st.sampled_from([(top,), *_paths(doc[top], (top,))]), label=label)


def _delete(data, doc):
    path = _pick_path(data, doc, "delete")
    del _at(doc, path[:-1])[path[-1]]
    return path[0]


def _replace(data, doc):
    path = _pick_path(data, doc, "replace")
    value = data.draw(st.sampled_from(_NASTY) | _JSON_VALUES | _DEPTHS.map(_nested), label="value")
    _at(doc, path[:-1])[path[-1]] = value
    return path[0]


def _add_key(data, doc):
    dicts = [()] + [path for path in _paths(doc) if isinstance(_at(doc, path), dict)]
    path = data.draw(st.sampled_from(dicts), label="add key to")
    key = data.draw(st.sampled_from(["<b>bogus</b>", "score ", "Name"]), label="key")
    _at(doc, path)[key] = 1
    return path[0] if path else key


def _truncate(data, doc):
    lists = [path for path in _paths(doc) if isinstance(_at(doc, path), list) and _at(doc, path)]
    path = data.draw(st.sampled_from(lists), label="truncate")
    items = _at(doc, path)
    del items[data.draw(st.integers(0, len(items) - 1), label="keep"):]
    return path[0]


def _unequal_columns(data, doc):
    block = data.draw(st.sampled_from(SCORE_BLOCKS), label="block")
    column = _at(doc, (block, data.draw(st.sampled_from(sorted(doc[block])), label="column")))
    if data.draw(st.booleans(), label="grow"):
        column.append(column[-1])
    else:
        column.pop()
    return block


def _limits(doc) -> dict[str, int]:
    design = doc["design"]
    return {"repeat": design["n_repeats"], "outer_fold": design["n_outer_folds"],
            "inner_fold": design["n_inner_folds"], "config": len(doc["configurations"]),
            "metric": len(design["metrics"]), "test_indices": design["n_samples"]}


def _index_out_of_range(data, doc):
    limits = _limits(doc)
    paths = [path for path in _paths(doc) if isinstance(_at(doc, path), int)
             and any(name in path for name in limits) and path[0] != "design"]
    path = data.draw(st.sampled_from(paths), label="index")
    limit = limits[next(name for name in path if name in limits)]
    value = data.draw(st.sampled_from([-1, limit, limit + 1, 2**31, 2**63, -(2**63) - 1, 10**20]))
    _at(doc, path[:-1])[path[-1]] = value
    return path[0]


def _duplicate(data, doc):
    where, field = data.draw(st.sampled_from([("configurations", "id"), ("families", "name"),
                                              ("outer_folds", "outer_fold")]), label="duplicate")
    items = doc[where]
    first, second = data.draw(st.permutations(range(len(items))), label="pair")[:2]
    items[second][field] = items[first][field]
    return where


def _unknown_metric(data, doc):
    metrics = doc["design"]["metrics"]
    choice = data.draw(st.sampled_from(["drop", "rename", "refer"]), label="metric")
    if choice == "drop":
        del metrics[1:]
        return "design"
    if choice == "rename":  # names are free text: still a valid assessment
        metrics[0] = "<made-up score>"
        return "design"
    block = data.draw(st.sampled_from(SCORE_BLOCKS), label="block")
    column = doc[block]["metric"]
    column[data.draw(st.integers(0, len(column) - 1))] = len(metrics) + data.draw(st.integers(0, 3))
    return block


def _bad_base64(data, doc):
    text = data.draw(st.sampled_from(_BASE64) | st.text(max_size=40), label="base64")
    if data.draw(st.booleans(), label="prediction") and doc["predictions"]:
        doc["predictions"][data.draw(st.integers(0, len(doc["predictions"]) - 1))]["data"] = text
        return "predictions"
    doc["families"][data.draw(st.integers(0, len(doc["families"]) - 1))]["estimator_skops"] = text
    return "families"


def _schema_version(data, doc):
    doc["schema_version"] = data.draw(st.sampled_from([0, 3, -1, "1", 1.5, None, [1], 2**64]))
    return "schema_version"


def _created_at(data, doc):
    doc["created_at"] = data.draw(st.sampled_from(_TIMES), label="created_at")
    return "created_at"


def _uuid(data, doc):
    fresh = uuid4()
    value = data.draw(st.sampled_from(_UUIDS), label="uuid")
    if isinstance(value, str):
        value = value.format(uuid=fresh, upper=str(fresh).upper(), hex=fresh.hex)
    doc["uuid"] = value
    return "uuid"


def _body(data, doc):
    text = json.dumps(doc).encode()
    cut = data.draw(st.integers(0, len(text) - 1), label="at")
    kind = data.draw(st.sampled_from(["truncated", "not utf-8", "junk", "empty", "not an object"]))
    if kind == "truncated":
        return text[:cut]
    if kind == "not utf-8":
        return text[:cut] + data.draw(st.sampled_from([b"\xff", b"\xc3", b"\xed\xa0\x80", b"\x80\x80"])) + text[cut:]
    if kind == "junk":
        return data.draw(st.binary(max_size=64), label="junk")
    if kind == "empty":
        return b""
    return data.draw(st.sampled_from([b"null", b"[]", b"NaN", b"1", b'"text"', b"{}"]))


# Replacing is listed twice: it is the widest mutation, any value of any type at any path.
MUTATIONS = [_delete, _replace, _replace, _add_key, _truncate, _unequal_columns, _index_out_of_range, _duplicate,
             _unknown_metric, _bad_base64, _schema_version, _created_at, _uuid, _body]


def _names(entry: dict, top: str) -> bool:
    """True when a 422 entry's location or message names ``top``, the top-level key that was broken."""
    loc = entry["loc"]
    if top == "body":
        return loc[:1] == ["body"]
    if top in loc[1:2]:
        return True
    return re.search(rf"(?<![\w.]){re.escape(top)}(?![\w])", entry["msg"]) is not None


def _judged_valid(body: bytes) -> bool:
    """Python's json module and pydantic's Python-object validation: not the way the server accepts a
    push (pydantic reading the bytes itself), so the two must agree on every body."""
    try:
        AssessmentPayload.model_validate(json.loads(body))
    except (ValueError, RecursionError):  # ValidationError is a ValueError, as are json's decode errors
        return False
    return True


@pytest.fixture(scope="module")
def lenient_client(tmp_path_factory):
    """A TestClient that answers a server error with its 500 instead of raising, so every one is counted."""
    folder = tmp_path_factory.mktemp("bad_input")
    app = create_app(Settings(db_url=f"sqlite:///{folder / 'store.db'}", config_dir=folder / "config"))
    with TestClient(app, raise_server_exceptions=False) as test_client:
        test_client.headers["authorization"] = f"Bearer {app.state.keys.ensure_write_key().secret}"
        yield test_client


@pytest.fixture(scope="module")
def valid_document(small_assessment) -> dict:
    return json.loads(small_assessment.payload.model_dump_json())


def test_generated_malformed_payloads_never_get_a_5xx(lenient_client, valid_document):
    statuses, mutations, accepted, named = Counter(), Counter(), set(), Counter()
    started = time.perf_counter()

    @settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
    @given(st.data())
    def push_one(data):
        doc = copy.deepcopy(valid_document)
        doc["uuid"] = str(uuid4())  # fresh each time, so that "already stored" (200) hides nothing
        mutate = data.draw(st.sampled_from(MUTATIONS), label="mutation")
        top = mutate(data, doc)
        body = top if isinstance(top, bytes) else json.dumps(doc).encode()
        top = "body" if isinstance(top, bytes) else top
        mutations[mutate.__name__.lstrip("_")] += 1
        response = lenient_client.post("/api/assessments", content=body, headers=JSON)
        statuses[response.status_code] += 1
        assert response.status_code < 500, f"{mutate.__name__} on {top}: {response.status_code}"
        if _judged_valid(body):
            assert response.status_code == 201, f"{mutate.__name__} on {top} left it valid: {response.text}"
            uuid = response.json()["uuid"]
            accepted.add(uuid)
            for url in (f"/api/assessments/{uuid}", f"/assessments/{uuid}"):
                read = lenient_client.get(url)
                statuses[f"GET {read.status_code}"] += 1
                assert read.status_code == 200, f"{url} after {mutate.__name__} on {top}: {read.status_code}"
            return
        assert response.status_code == 422, f"{mutate.__name__} on {top}: {response.status_code} {response.text}"
        detail = response.json()["detail"]
        assert detail and all(set(entry) == {"loc", "msg", "type"} for entry in detail)  # no `input` echoed
        assert len(response.content) < max(4_096, len(body) // 2), "the 422 repeats the body back"
        assert any(_names(entry, top) for entry in detail), f"{mutate.__name__} on {top}: no entry names it: {detail}"
        named[top] += 1

    try:
        push_one()
    finally:
        tried = sum(mutations.values())
        server_errors = sum(n for status, n in statuses.items() if isinstance(status, int) and status >= 500)
        print(f"\nbad inputs tried: {tried}, 5xx: {server_errors}, accepted as still valid: {len(accepted)}, "
              f"422 naming the field: {sum(named.values())}, statuses: {dict(sorted(statuses.items(), key=str))}, "
              f"{time.perf_counter() - started:.1f} s")
        print(f"mutations: {dict(sorted(mutations.items()))}")
        print(f"422s by the top-level key they name: {dict(sorted(named.items()))}")
    assert tried >= 500
    listed = {row["uuid"] for row in lenient_client.get("/api/assessments").json()}
    assert listed == accepted, "a rejected push left rows behind"


# Explicit cases: each names the JSON path its rejection must point at.

def _json_path(loc: list) -> str:
    return "".join(f"[{part}]" if isinstance(part, int) else f".{part}" for part in loc).lstrip(".")


def _rejection(client, body: bytes) -> str:
    """Push ``body``, expect a 422 and give back its entries as ``path: message`` lines."""
    response = client.post("/api/assessments", content=body, headers=JSON)
    assert response.status_code == 422, f"expected 422, got {response.status_code}: {response.text}"
    return "\n".join(f"{_json_path(entry['loc'])}: {entry['msg']}" for entry in response.json()["detail"])


def _without_outer_fold(doc: dict, outer_fold: int) -> None:
    """Drop one outer fold and everything that refers to it, except its inner scores."""
    doc["outer_folds"] = [fold for fold in doc["outer_folds"] if fold["outer_fold"] != outer_fold]
    columns = doc["outer_scores"]
    keep = [row for row, fold in enumerate(columns["outer_fold"]) if fold != outer_fold]
    doc["outer_scores"] = {name: [values[row] for row in keep] for name, values in columns.items()}
    for name in ("family_winners", "overall_winners", "predictions", "failures", "models"):
        doc[name] = [item for item in doc[name] if item["outer_fold"] != outer_fold]


def _shorter_prediction(doc: dict, position: int) -> None:
    prediction = doc["predictions"][position]
    values = np.frombuffer(base64.b64decode(prediction["data"]), dtype="<f8")
    prediction["data"] = base64.b64encode(values[: -prediction["n_columns"]].tobytes()).decode("ascii")


def _set(*path_and_value):
    *path, value = path_and_value

    def setting(doc: dict) -> None:
        _at(doc, path[:-1])[path[-1]] = value

    return setting


def _test_index_past_the_end(doc: dict) -> None:
    doc["outer_folds"][0]["test_indices"][0] = doc["design"]["n_samples"]


def _copy_config_id(doc: dict) -> None:
    doc["configurations"][3]["id"] = doc["configurations"][1]["id"]


CASES = {
    "outer fold index out of range": (_set("outer_folds", 2, "outer_fold", 3),
                                      "body: Value error, outer_folds[2]: repeat 0, outer fold 3 lies outside "
                                      "the design"),
    "inner fold index out of range": (_set("inner_scores", "inner_fold", 4, 3),
                                      "body: Value error, inner_scores.inner_fold[4]: 3 is out of range of "
                                      "design.n_inner_folds"),
    "test index out of range": (_test_index_past_the_end,
                                "body: Value error, outer_folds[0].test_indices: indices must lie in 0..{last} "
                                "(design.n_samples is {n_samples})"),
    "inner scores for a missing outer fold": (lambda doc: _without_outer_fold(doc, 2),
                                              "body: Value error, inner_scores.outer_fold[{first}]: repeat 0, "
                                              "outer fold 2 is not in outer_folds"),
    "prediction length mismatch": (lambda doc: _shorter_prediction(doc, 4),
                                   "body: Value error, predictions[4].data: holds"),
    "NaN score": (_set("inner_scores", "score", 2, float("nan")),
                  "body.inner_scores: Value error, score[2] is nan"),
    "Infinity fit time": (_set("outer_scores", "fit_time", 1, float("inf")),
                          "body.outer_scores: Value error, fit_time[1] is inf"),
    "-Infinity score time": (_set("inner_scores", "score_time", 0, float("-inf")),
                             "body.inner_scores: Value error, score_time[0] is -inf"),
    "unknown metric index": (_set("outer_scores", "metric", 3, 2),
                             "body: Value error, outer_scores.metric[3]: 2 is not a position in design.metrics"),
    "duplicate configuration ids": (_copy_config_id, "body: Value error, configurations[3]: "),
    "NaN inside params": (_set("configurations", 0, "params", "logisticregression__C", float("nan")),
                          "body: Value error, configurations[0].params['logisticregression__C']: nan is not "
                          "a finite number"),
    "count beyond an INTEGER column": (_set("design", "n_repeats", 2**63),
                                       "body.design.n_repeats: Input should be less than or equal to 2147483647"),
    "creation time off the calendar in UTC": (_set("created_at", "0001-01-01T00:00:00+14:00"),
                                              "body.created_at: Value error, 0001-01-01T00:00:00+14:00 lies "
                                              "outside the years 1..9999"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_inconsistent_payload_is_refused_naming_its_path(client, valid_document, case):
    mutate, expected = CASES[case]
    doc = copy.deepcopy(valid_document)
    mutate(doc)
    n_samples = valid_document["design"]["n_samples"]
    expected = expected.format(first=valid_document["inner_scores"]["outer_fold"].index(2), last=n_samples - 1,
                               n_samples=n_samples)
    body = json.dumps(doc).encode()  # NaN and infinities go out as the tokens NaN, Infinity, -Infinity
    assert expected in _rejection(client, body), f"expected {expected!r}"
    assert client.get("/api/assessments").json() == [], f"{case}: a rejected push left rows behind"
    named = expected.removeprefix("body: Value error, ").split(": ")[0].removeprefix("body.")
    print(f"{case}: 422 naming {named}, nothing stored")


BODIES = {
    "empty": (b"", "body: Field required"),
    "not JSON": (b"{'uuid': 1}", "body[1]: JSON decode error"),
    "truncated JSON": (b'{"name": "a', "body[9]: JSON decode error"),
    "not UTF-8": (b'{"name": "\xff"}', "body: the body is not JSON this server can read (byte 10 is not UTF-8)"),
    "nested too deeply": (b"[" * 100_000 + b"]" * 100_000, "body: the body is not JSON this server can read "
                                                           "(arrays or objects nest too deeply)"),
    "NaN token as the whole body": (b"NaN", "body: Input should be an object"),
}


@pytest.mark.parametrize("case", list(BODIES))
def test_unreadable_body_gets_422_naming_the_body(client, case):
    body, expected = BODIES[case]
    assert expected in _rejection(client, body), f"expected {expected!r}"
    assert client.get("/api/assessments").json() == []
    print(f"{case} ({len(body)} bytes): 422 naming the body, nothing stored")


@pytest.mark.parametrize("chunked", [False, True], ids=["content-length", "chunked"])
def test_body_over_the_limit_gets_413_and_one_at_the_limit_is_read(tmp_path, valid_document, chunked):
    body = json.dumps(valid_document).encode()
    app = create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config",
                              max_body_bytes=len(body) - 1))
    with TestClient(app) as test_client:
        test_client.headers["authorization"] = f"Bearer {app.state.keys.ensure_write_key().secret}"
        # A generator body makes httpx send it chunked, without Content-Length.
        content = (body[start:start + 4_096] for start in range(0, len(body), 4_096)) if chunked else body
        response = test_client.post("/api/assessments", content=content, headers=JSON)
        assert ("content-length" not in response.request.headers) is chunked
        assert response.status_code == 413, response.text
        message = response.json()["detail"][0]["msg"]
        assert f"{len(body) - 1}" in message and "FOLDWISE_MAX_BODY_MB" in message, message
        assert test_client.get("/api/assessments").json() == []

    app = create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config",
                              max_body_bytes=len(body)))
    with TestClient(app) as test_client:
        test_client.headers["authorization"] = f"Bearer {app.state.keys.ensure_write_key().secret}"
        content = (body[start:start + 4_096] for start in range(0, len(body), 4_096)) if chunked else body
        assert test_client.post("/api/assessments", content=content, headers=JSON).status_code == 201
    print(f"{'chunked' if chunked else 'Content-Length'}: {len(body)} bytes refused (413) by a limit of "
          f"{len(body) - 1}, stored (201) by a limit of {len(body)}")
