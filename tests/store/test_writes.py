"""Inserting and deleting assessments: once only, all or nothing, cascading; on SQLite and PostgreSQL."""

from __future__ import annotations

import sqlite3
import threading

import psycopg
import pytest
from sqlalchemy import event, make_url
from sqlalchemy.exc import IntegrityError

from foldwise.payload import Failure
from foldwise.store import (
    delete_assessment,
    get_assessment,
    insert_assessment,
    list_assessments,
    load_payload,
    make_engine,
    tables,
)

TABLES = [table.name for table in tables.metadata.sorted_tables]


def row_counts(url: str) -> dict[str, int]:
    """Rows per table, read with the backend's own driver (sqlite3, psycopg) rather than through the store."""
    address = make_url(url)
    if address.get_backend_name() == "sqlite":
        raw = sqlite3.connect(address.database)
    else:
        raw = psycopg.connect(address.set(drivername="postgresql").render_as_string(hide_password=False))
    try:
        return {name: raw.execute(f"SELECT count(*) FROM {name}").fetchone()[0] for name in TABLES}
    finally:
        raw.close()


def expected_counts(*payloads) -> dict[str, int]:
    sizes = {"assessments": lambda p: 1, "families": lambda p: len(p.families),
             "configurations": lambda p: len(p.configurations), "outer_folds": lambda p: len(p.outer_folds),
             "inner_scores": lambda p: len(p.inner_scores.score),
             "outer_scores": lambda p: len(p.outer_scores.score),
             "fold_choices": lambda p: len(p.family_winners) + len(p.overall_winners),
             "predictions": lambda p: len(p.predictions), "failures": lambda p: len(p.failures),
             "fitted_models": lambda p: len(p.models), "ensembles": lambda p: 0,
             "ensemble_members": lambda p: 0, "inner_summaries": _summary_count,
             "final_selections": lambda p: int(p.final is not None),
             "live_runs": lambda p: 0, "live_folds": lambda p: 0}  # a stored assessment writes no live report
    return {name: sum(sizes[name](p) for p in payloads) for name in TABLES}


def _summary_count(payload) -> int:
    """One inner summary per (repeat, outer fold, configuration, metric) the inner scores hold."""
    inner = payload.inner_scores
    return len(set(zip(inner.repeat, inner.outer_fold, inner.config, inner.metric, strict=True)))


def test_insert_returns_true_then_false_and_stores_nothing_twice(engine, store_url, make_payload):
    payload = make_payload()
    assert insert_assessment(engine, payload) is True
    assert row_counts(store_url) == expected_counts(payload)
    assert insert_assessment(engine, payload) is False
    assert row_counts(store_url) == expected_counts(payload)


def test_a_failing_insert_leaves_no_rows_behind(engine, store_url, make_payload):
    kept = make_payload(seed=1)
    insert_assessment(engine, kept)
    # Failures are written last; a message of None breaks their NOT NULL constraint after every score
    # row of the assessment has gone in. model_construct skips the payload's own validation.
    broken = make_payload(seed=2).model_copy(update={"failures": [Failure.model_construct(
        level="outer", repeat=0, outer_fold=0, inner_fold=None, config=0, message=None)]})
    refused = {"sqlite": "NOT NULL constraint failed: failures.message",
               "postgresql": 'null value in column "message" of relation "failures" violates not-null'}
    with pytest.raises(IntegrityError, match=refused[engine.dialect.name]):
        insert_assessment(engine, broken)
    assert row_counts(store_url) == expected_counts(kept)
    assert get_assessment(engine, str(broken.uuid)) is None
    assert load_payload(engine, kept.uuid) == kept


def test_a_half_written_assessment_is_never_visible_to_readers(engine, store_url, make_payload):
    reader = make_engine(store_url)
    seen = []

    def look(connection, cursor, statement, *_):
        # Runs inside the writer's transaction, right after its inner scores went in.
        if statement.startswith("INSERT INTO inner_scores") and not seen:
            seen.append((len(list_assessments(reader)), row_counts(store_url)))

    event.listen(engine, "after_cursor_execute", look)
    payload = make_payload()
    assert insert_assessment(engine, payload)
    event.remove(engine, "after_cursor_execute", look)
    [(listed, counts)] = seen
    assert listed == 0
    assert counts == dict.fromkeys(TABLES, 0)
    assert len(list_assessments(reader)) == 1
    reader.dispose()


def test_two_writers_racing_with_one_uuid_store_it_once(store_url, make_payload):
    engines = [make_engine(store_url), make_engine(store_url)]  # as two processes would, each its own pool
    payload = make_payload()
    start = threading.Barrier(2)
    results = []

    def write(engine):
        start.wait()
        results.append(insert_assessment(engine, payload))

    threads = [threading.Thread(target=write, args=(engine,)) for engine in engines]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(results) == [False, True]
    assert row_counts(store_url) == expected_counts(payload)
    for engine in engines:
        engine.dispose()


def test_delete_cascades_to_every_child_row_and_spares_other_assessments(engine, store_url, make_payload):
    gone, kept = make_payload(seed=3), make_payload(seed=4)
    insert_assessment(engine, gone)
    insert_assessment(engine, kept)
    assert row_counts(store_url) == expected_counts(gone, kept)
    assert delete_assessment(engine, str(gone.uuid)) is True
    assert row_counts(store_url) == expected_counts(kept)
    assert delete_assessment(engine, str(gone.uuid)) is False
    assert load_payload(engine, gone.uuid) is None
    assert load_payload(engine, kept.uuid) == kept


def test_a_malformed_uuid_is_refused_with_what_was_received(engine):
    with pytest.raises(ValueError, match=r"32 hex digits.*received 'not-a-uuid'"):
        delete_assessment(engine, "not-a-uuid")
