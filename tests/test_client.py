"""save, push, spool and resend against a real store and a real uvicorn process on loopback."""

from __future__ import annotations

from uuid import uuid4

import httpx
import pytest

from foldwise import client
from foldwise.client import CREATED, SPOOLED, STORED, PushRejected, push, resend
from foldwise.store import load_payload, make_engine

pytestmark = pytest.mark.server


def test_save_reads_back_identical(tmp_path, small_assessment):
    target = tmp_path / "saved.db"
    assert small_assessment.save(str(target)) is True
    assert small_assessment.save(str(target)) is False  # same uuid: stored once
    engine = make_engine(f"sqlite:///{target}")
    assert load_payload(engine, small_assessment.uuid) == small_assessment.payload
    engine.dispose()


def test_push_to_a_real_server_reads_back_identical(live_server, small_assessment):
    assert small_assessment.push(live_server.url) in (CREATED, STORED)
    assert small_assessment.push(live_server.url) == STORED
    body = httpx.get(f"{live_server.url}/api/assessments/{small_assessment.uuid}").json()
    assert body["name"] == small_assessment.name
    engine = make_engine(f"sqlite:///{live_server.db_path}")
    assert load_payload(engine, small_assessment.uuid) == small_assessment.payload
    engine.dispose()


def test_a_body_sent_in_many_pieces_arrives_whole(live_server, small_assessment, monkeypatch):
    # Large pushes go out in pieces; shrink the piece so this small one is sent as dozens of them.
    monkeypatch.setattr(client, "_PIECE", 1000)
    payload = small_assessment.payload.model_copy(update={"name": "sent in pieces", "uuid": uuid4()})
    assert len(payload.model_dump_json()) > 50 * client._PIECE
    assert push(payload, live_server.url) == CREATED
    engine = make_engine(f"sqlite:///{live_server.db_path}")
    assert load_payload(engine, payload.uuid) == payload
    engine.dispose()


def test_unreachable_server_spools_and_resend_delivers(tmp_path, live_server, small_assessment, unused_port):
    payload = small_assessment.payload.model_copy(update={"name": "spooled then resent", "uuid": uuid4()})
    dead = f"http://127.0.0.1:{unused_port}"  # nothing listens there
    spool = tmp_path / "spool"
    with pytest.warns(RuntimeWarning, match="foldwise resend"):
        assert push(payload, dead, spool_dir=spool, retries=2, backoff=0.01) == SPOOLED
    assert len(list(spool.glob("*.json"))) == 1
    still = resend(spool_dir=spool, retries=1)
    assert "still unreachable" in still[0][1]
    assert len(list(spool.glob("*.json"))) == 1  # nothing lost
    assert resend(spool_dir=spool, url=live_server.url) == [(f"{payload.uuid}.json", CREATED)]
    assert list(spool.glob("*.json")) == []
    engine = make_engine(f"sqlite:///{live_server.db_path}")
    assert load_payload(engine, str(payload.uuid)) == payload
    engine.dispose()


def test_a_refused_payload_raises_and_is_not_spooled(tmp_path, live_server, small_assessment):
    bad = small_assessment.payload.model_copy(update={"name": "", "uuid": uuid4()})  # copies skip validation
    with pytest.raises(PushRejected, match="name"):
        push(bad, live_server.url, spool_dir=tmp_path / "spool")
    assert not (tmp_path / "spool").exists()


@pytest.fixture
def failing_server():
    """A real HTTP server on loopback that reads each request and answers 503, as a proxy in front of a
    foldwise server that is restarting would (the standard library's http.server); counts the requests."""
    import json
    import threading
    from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

    seen = []

    class Failing(BaseHTTPRequestHandler):
        def do_POST(self):
            self.rfile.read(int(self.headers.get("content-length", 0)))
            seen.append(self.path)
            body = json.dumps({"detail": [{"loc": [], "msg": "the store is being restarted",
                                           "type": "server_error"}]}).encode()
            self.send_response(503)
            self.send_header("content-type", "application/json")
            self.send_header("content-length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, *args):  # keep the test output quiet
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Failing)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}", seen
    server.shutdown()
    server.server_close()


def test_a_server_error_is_retried_then_spooled_naming_it_and_resend_says_so(tmp_path, failing_server,
                                                                              live_server, small_assessment):
    url, seen = failing_server
    payload = small_assessment.payload.model_copy(update={"name": "server error then resent", "uuid": uuid4()})
    spool = tmp_path / "spool"
    with pytest.warns(RuntimeWarning, match=r"failed on the assessment \(503\).*being restarted.*foldwise resend"):
        assert push(payload, url, spool_dir=spool, retries=3, backoff=0.01) == SPOOLED
    assert len(seen) == 3  # retried before spooling
    outcome = resend(spool_dir=spool, retries=1)[0][1]
    # A server that answered is not "unreachable": the outcome names its error, and the file stays.
    assert "unreachable" not in outcome and "503" in outcome and "being restarted" in outcome
    assert len(list(spool.glob("*.json"))) == 1
    assert resend(spool_dir=spool, url=live_server.url) == [(f"{payload.uuid}.json", CREATED)]
