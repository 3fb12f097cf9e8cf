"""One reader per request: every page and API route of a stored assessment opens exactly one database
connection, and an assessment deleted while a request reads it never gives a 500.

Connections are counted by SQLAlchemy's own pool event (``checkout``: a connection handed out by the
engine), on the app's real engine over a real SQLite file.
"""

from __future__ import annotations

import pytest
from made_live_reports import made_report  # tests/made_live_reports.py
from sqlalchemy import event

from foldwise.store import delete_assessment

# Routes that read nothing from the store: they open no connection at all.
NO_STORE = {"/healthz", "/api/share-links", "/api/openapi.json"}
LIVE_RUN = "11111111-1111-4111-8111-111111111111"  # a running assessment's uuid, for the live routes


@pytest.fixture
def stored(client, small_assessment):
    """The small assessment pushed, and one saved ensemble of its overall fold winners."""
    response = client.post("/api/assessments", content=small_assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text
    uuid = str(small_assessment.uuid)
    members = sorted(set(small_assessment.winners["config"]))
    saved = client.post(f"/api/assessments/{uuid}/ensembles", json={"name": "winners", "members": members})
    assert saved.status_code == 201, saved.text
    reported = client.post(f"/api/live/{LIVE_RUN}", content=made_report(2).model_dump_json(),
                           headers={"content-type": "application/json"})
    assert reported.status_code == 201, reported.text
    return uuid, saved.json()["id"], members


@pytest.fixture
def checkouts(client):
    """A list that grows by one for every connection the app's engine hands out."""
    counted: list[int] = []

    def count(*_):
        counted.append(1)

    engine = client.app.state.engine
    event.listen(engine, "checkout", count)
    yield counted
    event.remove(engine, "checkout", count)


def _reads(client, uuid: str, eid: str, live: str | None = None) -> list[str]:
    """Every GET route in the API's schema, with the stored assessment's and ensemble's ids filled in (and a
    running assessment's, ``live``, on the live routes)."""
    paths = [path for path, operations in client.get("/api/openapi.json").json()["paths"].items()
             if "get" in operations and path not in NO_STORE]
    extra = {"/compare": f"?x={uuid}&y={uuid}", "/api/compare": f"?x={uuid}&y={uuid}"}
    urls = [path.format(uuid=live if live and path.startswith(("/live/", "/api/live/")) else uuid, eid=eid)
            + extra.get(path, "") for path in paths]
    # Pages the schema leaves out, and the variants of a page that read something else.
    return urls + [f"/assessments/{uuid}/report", f"/api/assessments/{uuid}/scores?level=inner&format=csv",
                   f"/api/assessments/{uuid}/winners?level=family", f"/api/assessments/{uuid}/ensembles?format=csv",
                   f"/assessments/{uuid}/distributions?by=config", f"/assessments/{uuid}/optimism?level=family",
                   "/?name=breast", f"/assessments/{uuid}/inner?repeat=0&outer_fold=2"]


def test_every_read_of_a_stored_assessment_opens_one_connection(client, stored, checkouts):
    uuid, eid, members = stored
    urls = _reads(client, uuid, eid, live=LIVE_RUN)
    assert len(urls) > 30  # every page, its JSON twin and the downloads
    counts = {}
    for url in urls:
        checkouts.clear()
        response = client.get(url)
        # The model file needs kept fitted fold winners, which this run did not keep: a 409 that says so.
        assert response.status_code == (409 if url.endswith("/model") else 200), (url, response.text)
        counts[url] = len(checkouts)
    assert counts == dict.fromkeys(urls, 1)


def test_every_write_and_preview_opens_one_connection(client, stored, checkouts):
    uuid, eid, members = stored
    calls = [("post", f"/api/assessments/{uuid}/ensembles/preview", {"members": members}, 200),
             ("post", f"/api/assessments/{uuid}/ensembles", {"name": "again", "members": members}, 201),
             ("delete", f"/api/ensembles/{eid}", None, 204)]
    for method, url, body, status in calls:
        checkouts.clear()
        response = client.request(method, url, json=body)
        assert response.status_code == status, (url, response.text)
        assert len(checkouts) == 1, url


def test_a_missing_assessment_is_the_same_404_on_every_route(client, stored, checkouts):
    uuid, eid, _ = stored
    missing = "00000000-0000-4000-8000-000000000000"
    urls = [url for url in _reads(client, missing, eid) if missing in url]
    for url in urls:
        response = client.get(url)
        if url.startswith("/compare?"):  # a form, in a browser: the id it cannot find named beside its field
            page = client.get(url, headers={"accept": "text/html"})
            assert page.status_code == 404 and "text/html" in page.headers["content-type"], url
            assert missing in page.text and 'name="x"' in page.text and 'id="x-error"' in page.text, url
        assert response.status_code == 404, url
        entry = response.json()["detail"][0]
        assert entry["type"] == "not_found" and missing in entry["msg"], url


@pytest.fixture
def delete_after_lookup(client):
    """Deletes the assessment from another connection just after the request's reader has found it."""
    engine, armed = client.app.state.engine, {}

    def after(connection, cursor, statement, parameters, context, executemany):
        if "uuid" in armed and "FROM assessments" in statement and "WHERE assessments.uuid" in statement:
            assert delete_assessment(engine, armed.pop("uuid"))

    event.listen(engine, "after_cursor_execute", after)
    yield armed
    event.remove(engine, "after_cursor_execute", after)


@pytest.mark.parametrize("page", ["", "/fold-winners", "/optimism", "/cost", "/ranking", "/compare",
                                  "/distributions", "/inner"])
def test_an_assessment_deleted_mid_request_is_read_whole_from_the_snapshot(client, stored, delete_after_lookup,
                                                                           page):
    uuid, _, _ = stored
    delete_after_lookup["uuid"] = uuid
    response = client.get(f"/api/assessments/{uuid}{page}")
    assert not delete_after_lookup  # the deletion ran, after the lookup and before the page's reads
    # The request's snapshot still holds every row it reads: the page is whole, never half read or a 500.
    assert response.status_code == 200, response.text
    assert client.get(f"/api/assessments/{uuid}{page}").status_code == 404


def test_an_assessment_deleted_before_the_lookup_is_a_404(client, stored):
    uuid, _, _ = stored
    engine, armed = client.app.state.engine, [uuid]

    def delete_first(*_):
        if armed:  # the request's own checkout; the deletion's connection passes by
            assert delete_assessment(engine, armed.pop())

    event.listen(engine, "checkout", delete_first)
    try:
        response = client.get(f"/assessments/{uuid}/optimism", headers={"accept": "text/html"})
    finally:
        event.remove(engine, "checkout", delete_first)
    assert not armed and response.status_code == 404
    assert "no assessment" in response.text
