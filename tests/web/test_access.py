"""Who may read and write: keys, share links, the Origin check and the browser-safety headers."""

from __future__ import annotations

import subprocess
import sys

import httpx
import pytest
from fastapi.testclient import TestClient
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path

from foldwise.keys import KeyFile
from foldwise.settings import Settings
from foldwise.web.app import create_app


def _app(tmp_path, **settings):
    return create_app(Settings(db_url=f"sqlite:///{tmp_path / 'store.db'}", config_dir=tmp_path / "config",
                               **settings))


def _push(client, assessment, **headers):
    return client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                       headers={"content-type": "application/json", **headers})


def test_writes_need_the_write_key(tmp_path, small_assessment):
    app = _app(tmp_path)
    write = app.state.keys.ensure_write_key().secret
    read = app.state.keys.create("read").secret
    with TestClient(app) as client:
        assert _push(client, small_assessment).status_code == 401
        assert _push(client, small_assessment, authorization=f"Bearer {read}").status_code == 401
        assert "write key" in message(_push(client, small_assessment))
        assert _push(client, small_assessment, authorization=f"Bearer {write}").status_code == 201
        # on loopback, reads need no key unless asked
        assert client.get("/api/assessments").status_code == 200


def test_a_revoked_key_stops_working_at_once(tmp_path, small_assessment):
    app = _app(tmp_path)
    key = app.state.keys.create("write", label="laptop")
    with TestClient(app) as client:
        assert _push(client, small_assessment, authorization=f"Bearer {key.secret}").status_code == 201
        KeyFile(tmp_path / "config" / "keys.json").revoke(key.id)  # as `foldwise keys revoke` does
        again = small_assessment.payload.model_copy(update={"name": "after revoking"})
        response = client.post("/api/assessments", content=again.model_dump_json(),
                               headers={"authorization": f"Bearer {key.secret}"})
        assert response.status_code == 401


def test_a_server_started_with_a_read_key_answers_keyless_reads_with_401(tmp_path):
    keys = KeyFile(tmp_path / "config" / "keys.json")
    read = keys.create("read").secret
    with TestClient(_app(tmp_path, require_read_key=True)) as client:
        assert client.get("/api/assessments").status_code == 401
        assert client.get("/").status_code == 401
        assert client.get("/api/assessments", headers={"authorization": f"Bearer {read}"}).status_code == 200
        assert client.get("/healthz").status_code == 200  # liveness stays open
        assert client.get("/static/foldwise.css").status_code == 200


def test_refuses_a_non_loopback_address_without_a_read_key(tmp_path):
    with pytest.raises(PermissionError, match="read key"):
        _app(tmp_path, host="0.0.0.0")
    KeyFile(tmp_path / "config" / "keys.json").create("read")
    app = _app(tmp_path, host="0.0.0.0")  # only built, never bound: tests stay on loopback
    with TestClient(app) as client:
        assert client.get("/api/assessments").status_code == 401


def test_serve_refuses_to_start_on_another_address_without_a_read_key(tmp_path):
    result = subprocess.run(
        [sys.executable, "-m", "foldwise.cli", "serve", "--create", "--db", str(tmp_path / "s.db"), "--host", "0.0.0.0",
         "--port", "1"], capture_output=True, text=True, timeout=60,
        env={"FOLDWISE_CONFIG": str(tmp_path / "config"), "PATH": "/usr/bin:/bin", "HOME": str(tmp_path)})
    assert result.returncode == 2
    assert "without a read key" in result.stderr


def test_a_share_link_becomes_an_httponly_strict_cookie_and_leaves_the_url(tmp_path, small_assessment):
    app = _app(tmp_path, require_read_key=True)
    write = app.state.keys.ensure_write_key().secret
    with TestClient(app, follow_redirects=False) as client:
        _push(client, small_assessment, authorization=f"Bearer {write}")
        made = client.post("/api/share-links", json={"path": f"/assessments/{small_assessment.uuid}?metric=accuracy"},
                           headers={"authorization": f"Bearer {write}"})
        assert made.status_code == 200
        link = httpx.URL(made.json()["url"])
        assert link.params["metric"] == "accuracy" and link.params["key"].startswith("fw_r_")

    with TestClient(app, follow_redirects=False) as teammate:
        arrived = teammate.get(f"{link.path}?{link.query.decode()}")
        assert arrived.status_code == 303
        assert arrived.headers["location"] == f"/assessments/{small_assessment.uuid}?metric=accuracy"
        cookie = arrived.headers["set-cookie"]
        assert "httponly" in cookie.lower() and "samesite=strict" in cookie.lower() and "fw_r_" in cookie
        page = teammate.get(arrived.headers["location"])
        assert page.status_code == 200
        assert '<option value="accuracy" selected>' in page.text  # the same view
        # a read key does not write
        again = small_assessment.payload.model_copy(update={"name": "teammate push"})
        assert teammate.post("/api/assessments", content=again.model_dump_json()).status_code == 401


def test_state_changing_requests_from_another_origin_are_refused(client, small_assessment):
    response = _push(client, small_assessment, origin="https://elsewhere.example")
    assert response.status_code == 403
    assert "cross-origin" in message(response)
    assert _push(client, small_assessment, origin="http://testserver").status_code == 201


def test_every_response_carries_the_safety_headers(client):
    for path in ("/", "/api/assessments", "/static/foldwise.css", "/nope"):
        headers = client.get(path).headers
        policy = headers["content-security-policy"]
        assert "script-src 'self'" in policy and "frame-ancestors 'none'" in policy
        assert headers["x-content-type-options"] == "nosniff"


def test_cli_keys_create_list_revoke(tmp_path):
    env = {"FOLDWISE_CONFIG": str(tmp_path / "config"), "PATH": "/usr/bin:/bin", "HOME": str(tmp_path)}

    def run(*args):
        return subprocess.run([sys.executable, "-m", "foldwise.cli", "keys", *args], capture_output=True,
                              text=True, timeout=60, env=env)

    shown = run("show").stdout.strip()
    assert shown.startswith("fw_w_") and run("show").stdout.strip() == shown  # created once, then shown
    created = run("create", "--read", "--label", "review").stdout
    key_id = created.split()[2].rstrip(":")
    assert key_id in run("list").stdout
    assert run("revoke", key_id).returncode == 0
    assert "revoked" in run("list").stdout
    assert (tmp_path / "config" / "keys.json").stat().st_mode & 0o777 == 0o600
