"""The API keeps its own OpenAPI contract, as an outside tester driven by that schema finds it.

schemathesis (PyPI; its pytest integration) reads ``/api/openapi.json`` from a real server on loopback and
sends requests generated from it to every operation, with the write key and without, checking each answer:
no server error, a status code the schema declares for the operation, a declared content type, a body that
fits the declared schema, refusals of data the schema calls invalid, 405 with ``Allow`` for methods the
schema does not list. The store holds two real assessments and their ensembles first, and most generated
uuids are swapped for stored ones, so the reads meet real data and not only 404s.

Bounded in examples per operation and derandomized (a fixed seed), so a run is repeatable.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import zlib
from collections import Counter
from pathlib import Path

import httpx
import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis.specs.openapi.checks import positive_data_acceptance

import foldwise
from foldwise.keys import KeyFile
from foldwise.settings import Settings
from foldwise.web.app import create_app
from foldwise.wire import CONTENT_TYPE

MAX_EXAMPLES = int(os.environ.get("FOLDWISE_CONTRACT_EXAMPLES", "8"))
REQUESTS: Counter = Counter()  # (auth, operation, status) -> answers, for the report at the end


@pytest.fixture(scope="module")
def contract_server(start_live_server, small_assessment):
    server = start_live_server(FOLDER)
    assert server.write_key == WRITE_KEY
    auth = {"authorization": f"Bearer {server.write_key}"}
    other = foldwise.nested_cv(*_second_run(), outer=2, inner=2, n_jobs=1, progress=False,
                               name="breast cancer, one family", dataset="breast-cancer (scikit-learn bundled)")
    ids = {"uuid": [], "eid": []}
    for assessment in (small_assessment, other):
        pushed = httpx.post(f"{server.url}/api/assessments", content=assessment.payload.packed_json(),
                            headers={**auth, "content-type": "application/json"}, timeout=60)
        assert pushed.status_code in (200, 201), pushed.text
        ids["uuid"].append(assessment.uuid)
        first = assessment.payload.configurations[0].id
        for name in ("kept", "to delete"):
            saved = httpx.post(f"{server.url}/api/assessments/{assessment.uuid}/ensembles",
                               json={"name": name, "members": [first]}, headers=auth, timeout=60)
            assert saved.status_code == 201, saved.text
            ids["eid"].append(saved.json()["id"])
    STORED.update(ids)
    yield server, ids
    shutil.rmtree(FOLDER, ignore_errors=True)
    _report()


def _second_run():
    from sklearn.datasets import load_breast_cancer
    from sklearn.tree import DecisionTreeClassifier

    X, y = load_breast_cancer(return_X_y=True)
    return {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}, X[1::3], y[1::3]


def _this_apps_schema() -> dict:
    """The schema as create_app builds it (the live server's is checked to be the same, below): the tests
    are generated from it when this module is collected, before any server runs."""
    with tempfile.TemporaryDirectory() as folder:
        app = create_app(Settings(db_url=f"sqlite:///{folder}/schema.db", config_dir=Path(folder) / "config"))
        try:
            return app.openapi()
        finally:
            app.state.engine.dispose()


SCHEMA = _this_apps_schema()
# The packed body of foldwise.wire is bytes; the tester sends what it generates for it as they are.
schemathesis.serializer.alias(CONTENT_TYPE, "application/octet-stream")
keyed_schema = schemathesis.openapi.from_dict(SCHEMA)
open_schema = schemathesis.openapi.from_dict(SCHEMA)
STORED: dict[str, list[str]] = {}  # path parameter -> ids in the live server's store, filled by contract_server
# The server's folder and write key, chosen before it starts: the tester builds some of its cases, keyed
# ones among them, when this module is collected.
FOLDER = Path(tempfile.mkdtemp(prefix="foldwise-contract-"))
WRITE_KEY = KeyFile(FOLDER / "config" / "keys.json").ensure_write_key().secret


def map_path_parameters(context, path_parameters):
    # Three generated ids in four become stored ones (chosen from the generated text, so the run stays
    # repeatable); the fourth keeps its generated value and meets the 404 path.
    for name, stored in STORED.items():
        value = (path_parameters or {}).get(name)
        if isinstance(value, str) and (digest := zlib.crc32(value.encode())) % 4:
            path_parameters[name] = stored[digest % len(stored)]
    return path_parameters


keyed_schema.hook(map_path_parameters)
open_schema.hook(map_path_parameters)


@keyed_schema.auth()
class WriteKey:
    """The write key as the bearer token of every request: the tester then also probes each route that
    declares the scheme without it and with a wrong one, and expects 401 or 403."""

    def get(self, case, context):
        return WRITE_KEY

    def set(self, case, data, context):
        case.headers = {**(case.headers or {}), "Authorization": f"Bearer {data}"}  # as the scheme names it


def test_the_live_server_serves_this_schema(contract_server):
    server, _ = contract_server
    assert httpx.get(f"{server.url}/api/openapi.json").json() == SCHEMA


BOUNDED = settings(max_examples=MAX_EXAMPLES, derandomize=True, deadline=None,
                   suppress_health_check=list(HealthCheck))


@pytest.mark.server
@keyed_schema.parametrize()
@BOUNDED
def test_with_the_write_key_every_answer_keeps_the_contract(case, contract_server):
    _call_and_validate(case, contract_server[0], keyed=True)


@pytest.mark.server
@open_schema.parametrize()
@BOUNDED
def test_without_a_key_every_answer_keeps_the_contract(case, contract_server):
    _call_and_validate(case, contract_server[0], keyed=False)


def _call_and_validate(case, server, *, keyed: bool) -> None:
    # Every check but one: a request the schema allows may still be refused for what it names (a metric
    # or a configuration the assessment does not have, two assessments that share no metric), which no
    # schema of these routes can express; such refusals are 422s the schema declares.
    response = case.call_and_validate(base_url=server.url, timeout=60, excluded_checks=[positive_data_acceptance])
    REQUESTS["write key" if keyed else "no key", case.operation.label, response.status_code] += 1


def _report() -> None:
    by_status = Counter()
    for (_, _, status), count in REQUESTS.items():
        by_status[status] += count
    operations = {operation for _, operation, _ in REQUESTS}
    print(f"\nschemathesis: {sum(REQUESTS.values())} requests to {len(operations)} operations; "
          f"answers by status: {dict(sorted(by_status.items()))}")
