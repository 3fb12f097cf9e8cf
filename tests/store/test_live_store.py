"""Running assessments in the store (store/live.py), on SQLite and PostgreSQL: the newest report kept, late
and repeated reports harmless, a changed design refused, and a stored assessment replacing its run."""

from __future__ import annotations

from datetime import datetime
from uuid import uuid4

import pytest
from made_live_reports import made_report

from foldwise.store import StoreReader, delete_assessment, insert_assessment
from foldwise.store.live import (
    CREATED,
    FINISHED,
    STALE,
    UPDATED,
    LiveConflict,
    delete_live_run,
    live_run_in,
    record_live_report,
)
from foldwise.store.live import live_runs_in_progress as _in_progress

NOW = datetime(2026, 3, 4, 10, 5)


def live_run_for(engine, uuid):
    with StoreReader.open(engine) as store:  # as a request reads it: one connection, one snapshot
        return live_run_in(store.connection, uuid)


def live_runs_in_progress(engine):
    with StoreReader.open(engine) as store:
        return _in_progress(store.connection)


def test_a_report_reads_back_as_sent_with_its_folds(engine):
    uuid = str(uuid4())
    report = made_report(3)
    assert record_live_report(engine, uuid, report, received_at=NOW) == CREATED
    run = live_run_for(engine, uuid)
    assert run.report == report  # every field, every fold, every score (pydantic equality)
    assert run.received_at == NOW and run.assessment is None and run.n_folds_done == 3
    assert [r.uuid for r in live_runs_in_progress(engine)] == [uuid]


def test_the_whole_state_in_each_report_makes_resending_and_catching_up_idempotent(engine):
    uuid = str(uuid4())
    record_live_report(engine, uuid, made_report(1, seconds=10), received_at=NOW)
    # reports 2 and 3 were lost (the server was away); report 4 alone catches the server up
    assert record_live_report(engine, uuid, made_report(4, seconds=40), received_at=NOW) == UPDATED
    assert record_live_report(engine, uuid, made_report(4, seconds=40), received_at=NOW) == UPDATED  # sent twice
    assert live_run_for(engine, uuid).report == made_report(4, seconds=40)
    # report 2, held up on the way, arrives last: the newer state stays
    assert record_live_report(engine, uuid, made_report(2, seconds=20), received_at=NOW) == STALE
    assert live_run_for(engine, uuid).n_folds_done == 4


@pytest.mark.parametrize("change, field", [({"metrics": ["accuracy", "roc_auc"]}, "metrics"),
                                           ({"n_outer_folds": 4}, "n_outer_folds"),
                                           ({"task": "regression"}, "task")])
def test_a_report_of_another_design_under_the_same_uuid_is_refused_naming_the_field(engine, change, field):
    uuid = str(uuid4())
    record_live_report(engine, uuid, made_report(0), received_at=NOW)
    with pytest.raises(LiveConflict, match=field) as refused:
        record_live_report(engine, uuid, made_report(0, seconds=5, **change), received_at=NOW)
    assert refused.value.field == field
    assert live_run_for(engine, uuid).report == made_report(0)


def test_the_stored_assessment_replaces_its_run_and_later_reports_change_nothing(engine, make_payload):
    payload = make_payload()
    uuid = str(payload.uuid)
    record_live_report(engine, uuid, made_report(5), received_at=NOW)
    other = str(uuid4())
    record_live_report(engine, other, made_report(1), received_at=NOW)
    assert insert_assessment(engine, payload)
    assert [r.uuid for r in live_runs_in_progress(engine)] == [other]
    assert live_run_for(engine, uuid).assessment == uuid  # the live record points to the assessment
    assert record_live_report(engine, uuid, made_report(6, seconds=60), received_at=NOW) == FINISHED
    assert live_run_for(engine, uuid).n_folds_done == 5
    assert delete_assessment(engine, uuid)
    assert live_run_for(engine, uuid).assessment is None


def test_runs_are_listed_most_recently_heard_from_first_and_can_be_forgotten(engine):
    first, second = str(uuid4()), str(uuid4())
    record_live_report(engine, first, made_report(1), received_at=NOW)
    record_live_report(engine, second, made_report(1), received_at=NOW.replace(minute=6))
    assert [r.uuid for r in live_runs_in_progress(engine)] == [second, first]
    assert delete_live_run(engine, second)
    assert not delete_live_run(engine, second)
    assert [r.uuid for r in live_runs_in_progress(engine)] == [first]
    assert live_run_for(engine, second) is None
