"""One store, two ways in: ``save`` from a script and the server's API read the same assessment, on a SQLite
file and on a PostgreSQL database alike (the team store)."""

from __future__ import annotations

from foldwise.client import save
from foldwise.store import load_payload


def test_an_assessment_saved_by_a_script_is_what_the_server_serves(store_url, small_assessment, open_client):
    payload = small_assessment.payload  # a real nested CV on scikit-learn's bundled breast-cancer data
    uuid = str(payload.uuid)
    assert save(payload, store_url) is True
    assert save(payload, store_url) is False  # the same uuid again: already stored

    with open_client(store_url) as client:
        assert load_payload(client.app.state.engine, uuid) == payload
        assert [row["uuid"] for row in client.get("/api/assessments").json()] == [uuid]

        record = client.get(f"/api/assessments/{uuid}").json()
        assert (record["name"], record["dataset"], record["fingerprint"]) == (payload.name, payload.dataset,
                                                                              payload.fingerprint())
        assert record["configurations"] == [config.model_dump() for config in payload.configurations]

        # Every outer score, row for row in payload order, against the payload's own columns.
        rows = client.get(f"/api/assessments/{uuid}/scores", params={"level": "outer"}).json()
        block, metrics = payload.outer_scores, payload.design.metrics
        sent = [(r, o, payload.configurations[c].id, metrics[m], s) for r, o, c, m, s in
                zip(block.repeat, block.outer_fold, block.config, block.metric, block.score, strict=True)]
        assert [(row["repeat"], row["outer_fold"], row["config"], row["metric"], row["score"])
                for row in rows] == sent

        # Pushed to the server after the script saved it: the server finds it stored already.
        pushed = client.post("/api/assessments", content=payload.model_dump_json(),
                             headers={"content-type": "application/json"})
        assert (pushed.status_code, pushed.json()["created"]) == (200, False)
