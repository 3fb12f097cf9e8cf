"""Running assessments: the live routes through FastAPI's TestClient, then real runs with ``live=`` reporting to a
real server on loopback — listed on the index while they run, their page filling in fold by fold, replaced by
the pushed assessment at the end, shown as stalled when killed, and caught up after the server was away."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from uuid import uuid4

import httpx
import live_child
import numpy as np
import pytest
from made_live_reports import N_OUTER, N_REPEATS, made_report

from foldwise.keys import KeyFile
from foldwise.settings import Settings
from foldwise.web.app import create_app

STALL = 2.0  # seconds without a report before the real server calls a run stalled


@pytest.fixture
def live_client(tmp_path):
    from fastapi.testclient import TestClient

    app = create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config",
                              live_stall_seconds=0.5))
    with TestClient(app) as client:
        client.headers["authorization"] = f"Bearer {app.state.keys.ensure_write_key().secret}"
        yield client


def _send(client, uuid, report):
    return client.post(f"/api/live/{uuid}", content=report.model_dump_json(),
                       headers={"content-type": "application/json"})


def test_a_reported_run_is_listed_and_its_page_shows_the_partial_estimate(live_client):
    uuid, report = str(uuid4()), made_report(3)
    answer = _send(live_client, uuid, report)
    assert answer.status_code == 201 and answer.json()["outcome"] == "created", answer.text
    assert _send(live_client, uuid, report).status_code == 200  # the same report again: harmless

    listed = live_client.get("/api/live").json()
    assert [(r["uuid"], r["status"], r["fits_done"], r["n_folds_done"]) for r in listed] == \
        [(uuid, "running", report.fits_done, 3)]
    detail = live_client.get(f"/api/live/{uuid}").json()
    # Reference: a plain loop over the completed folds, the overall winner's outer score on the first metric.
    scores = [next(w.outer_scores[0] for w in fold.winners if w.config == fold.overall) for fold in report.folds]
    assert detail["estimate"]["mean"] == pytest.approx(np.mean(scores), abs=1e-12)
    assert detail["estimate"]["sd"] == pytest.approx(np.std(scores, ddof=1), abs=1e-12)
    assert detail["estimate"]["described"] == f"partial: over 3 of {N_REPEATS * N_OUTER} outer folds"
    assert [f["done"] for f in detail["folds"]] == [True] * 3 + [False] * 3

    page = live_client.get(f"/live/{uuid}")
    assert page.status_code == 200
    assert "partial: over 3 of 6 outer folds" in page.text and page.text.count('class="pending"') == 3
    index = live_client.get("/").text
    assert f'data-uuid="{uuid}"' in index and "<progress" in index and "invented live run" in index


def test_a_silent_run_is_shown_as_stalled_and_a_stopped_one_with_its_reason(live_client):
    stopped, silent = str(uuid4()), str(uuid4())
    _send(live_client, stopped, made_report(1, state="stopped", reason="KeyboardInterrupt: interrupted (Ctrl-C)"))
    _send(live_client, silent, made_report(1))
    time.sleep(0.7)  # past the app's live_stall_seconds of 0.5
    statuses = {r["uuid"]: r for r in live_client.get("/api/live").json()}
    assert statuses[silent]["status"] == "stalled" and "stalled since" in statuses[silent]["status_text"]
    assert statuses[stopped]["status"] == "stopped" and "Ctrl-C" in statuses[stopped]["status_text"]
    assert "stalled since" in live_client.get(f"/live/{silent}").text


def test_the_pushed_assessment_replaces_its_run(live_client, small_assessment):
    uuid = small_assessment.uuid
    _send(live_client, uuid, made_report(2))
    assert live_client.post("/api/assessments", content=small_assessment.payload.packed_json(),
                            headers={"content-type": "application/json"}).status_code == 201
    assert live_client.get("/api/live").json() == []
    moved = live_client.get(f"/live/{uuid}", follow_redirects=False)
    assert moved.status_code == 303 and moved.headers["location"].endswith(f"/assessments/{uuid}")
    assert _send(live_client, uuid, made_report(3, seconds=30)).json()["outcome"] == "finished"


@pytest.mark.parametrize("change, loc", [
    ({"fits_done": 10_000}, ["body"]),                   # more fits done than the run has
    ({"state": "stopped"}, ["body"]),                     # stopped without a reason
    ({"metrics": ["accuracy", "accuracy"]}, ["body"]),    # one metric twice
    ({"started_at": "2026-03-04T10:00:00"}, ["body", "started_at"]),  # a time without its offset
])
def test_a_report_that_contradicts_itself_is_refused_naming_the_field(live_client, change, loc):
    body = made_report(2).model_dump(mode="json") | change
    answer = live_client.post(f"/api/live/{uuid4()}", json=body)
    assert answer.status_code == 422, answer.text
    entry = answer.json()["detail"][0]
    assert entry["loc"][:len(loc)] == loc
    named = next(iter(change))
    assert named in entry["msg"] or named in entry["loc"]


def test_refusals_name_what_is_wrong(live_client):
    uuid = str(uuid4())
    _send(live_client, uuid, made_report(1))
    other_grid = _send(live_client, uuid, made_report(1, seconds=5, metrics=["roc_auc", "accuracy"]))
    assert other_grid.status_code == 409 and other_grid.json()["detail"][0]["loc"] == ["body", "metrics"]
    bad_uuid = _send(live_client, "not-a-uuid", made_report(1))
    assert bad_uuid.status_code == 422 and bad_uuid.json()["detail"][0]["loc"] == ["path", "uuid"]
    keyless = live_client.post(f"/api/live/{uuid}", content=made_report(1).model_dump_json(),
                               headers={"authorization": "", "content-type": "application/json"})
    assert keyless.status_code == 401
    assert live_client.get(f"/api/live/{uuid4()}").status_code == 404
    assert live_client.get("/live/nonsense").status_code == 404
    assert live_client.delete(f"/api/live/{uuid}").status_code == 204
    assert live_client.delete(f"/api/live/{uuid}").status_code == 404


# Real runs reporting to a real server.

def _child(url: str, name: str, out: Path, **env) -> subprocess.Popen:
    environment = {**os.environ, "PYTHONWARNINGS": "ignore", **env,
                   "PYTHONPATH": os.pathsep.join([str(Path(__file__).parent), os.environ.get("PYTHONPATH", "")])}
    return subprocess.Popen([sys.executable, "-c", "import live_child; live_child.main()", url, name, str(out)],
                            env=environment, start_new_session=True)


def _until(condition, *, timeout: float = 120.0, every: float = 0.1):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        found = condition()
        if found:
            return found
        time.sleep(every)
    raise AssertionError("the condition did not come true in time")


def _run_named(server, name):
    return next((run for run in httpx.get(f"{server.url}/api/live").json() if run["name"] == name), None)


@pytest.fixture
def live_view_server(tmp_path, serving):
    folder = tmp_path / "live-view"
    folder.mkdir()
    server = serving(folder / "live.db", folder / "server.log", env={"FOLDWISE_LIVE_STALL_SECONDS": str(STALL)})
    yield server
    server.stop()


@pytest.mark.server
def test_a_real_run_is_listed_running_fills_in_fold_by_fold_and_is_replaced_by_its_assessment(live_view_server,
                                                                                               tmp_path):
    server, out = live_view_server, tmp_path / "uuid"
    child = _child(server.url, "watched run", out, FOLDWISE_KEY=server.write_key, FOLDWISE_TEST_FIT_PAUSE="0.15")
    try:
        running = _until(lambda: (run := _run_named(server, "watched run")) and run["fits_done"] > 0 and run)
        assert running["status"] == "running" and running["fits_total"] == live_child.N_FITS
        index = httpx.get(server.url + "/").text
        assert f'data-uuid="{running["uuid"]}"' in index and "watched run" in index
        seen_folds = set()
        while child.poll() is None:  # the folds as the page shows them while the run goes on
            detail = httpx.get(f"{server.url}/api/live/{running['uuid']}").json()
            seen_folds.add(detail["run"]["n_folds_done"])
            time.sleep(0.1)
        assert child.wait() == 0
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    assert {1, 2} <= seen_folds  # the page filled in one fold at a time, not all at the end
    uuid = out.read_text()
    assert uuid == running["uuid"]  # the assessment is pushed under the run's uuid
    assert _run_named(server, "watched run") is None  # replaced: no longer listed as running
    moved = httpx.get(f"{server.url}/live/{uuid}")
    assert moved.status_code == 303 and moved.headers["location"] == f"{server.url}/assessments/{uuid}"
    stored = httpx.get(f"{server.url}/api/assessments/{uuid}").json()
    last = httpx.get(f"{server.url}/api/live/{uuid}").json()
    # One definition: the live view's estimate over all folds is the stored assessment's nested estimate.
    assert last["estimate"]["described"] == f"partial: over {live_child.OUTER} of {live_child.OUTER} outer folds"
    assert last["estimate"]["mean"] == stored["nested_estimate"]["mean"]
    assert last["run"]["fits_done"] == last["run"]["fits_total"] == live_child.N_FITS


@pytest.mark.server
def test_a_run_killed_mid_way_is_shown_as_stalled_since_its_last_report(live_view_server, tmp_path):
    server = live_view_server
    child = _child(server.url, "killed run", tmp_path / "uuid", FOLDWISE_KEY=server.write_key,
                   FOLDWISE_TEST_FIT_PAUSE="0.2")
    try:
        _until(lambda: (run := _run_named(server, "killed run")) and run["fits_done"] >= 3)
    finally:
        os.killpg(child.pid, signal.SIGKILL)
        child.wait()
    killed = _until(lambda: (run := _run_named(server, "killed run")) and run["status"] == "stalled" and run,
                    timeout=STALL + 30)
    assert 0 < killed["fits_done"] < killed["fits_total"]
    assert "stalled since" in killed["status_text"]
    page = httpx.get(killed["url"]).text
    assert "stalled since" in page and "killed run" in page


@pytest.mark.server
def test_a_run_whose_server_was_away_carries_on_and_catches_it_up(tmp_path, serving, unused_port):
    folder, gate = tmp_path / "late", tmp_path / "gate"
    folder.mkdir()
    key = KeyFile(folder / "config" / "keys.json").ensure_write_key().secret  # the server will take this key
    url = f"http://127.0.0.1:{unused_port}"
    child = _child(url, "run before its server", tmp_path / "uuid", FOLDWISE_KEY=key, FOLDWISE_TEST_GATE=str(gate),
                   FOLDWISE_TEST_GATE_AFTER=str(live_child.N_FITS // 2))
    server = None
    try:
        time.sleep(2.0)  # the run goes on with nobody listening, and waits at the gate half way
        assert child.poll() is None
        server = serving(folder / "live.db", folder / "server.log", port=unused_port)
        # The first report to get through carries every fold completed while the server was away.
        caught_up = _until(lambda: (run := _run_named(server, "run before its server")) and run)
        assert caught_up["fits_done"] >= live_child.N_FITS // 2 and caught_up["n_folds_done"] >= 1
        gate.touch()
        assert child.wait(timeout=120) == 0
        uuid = (tmp_path / "uuid").read_text()
        stored = httpx.get(f"{server.url}/api/assessments/{uuid}")
        assert stored.status_code == 200
        assert not math.isnan(stored.json()["nested_estimate"]["mean"])
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
        if server is not None:
            server.stop()
