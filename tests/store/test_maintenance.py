"""Backups and integrity checks on real SQLite files, with a writer busy on the same store."""

from __future__ import annotations

import sqlite3
import threading
from uuid import uuid4

import pytest

from foldwise.store import insert_assessment, list_assessments, load_payload, make_engine
from foldwise.store.maintenance import backup_to, check_store


@pytest.fixture
def sqlite_engine(tmp_path):
    engine = make_engine(f"sqlite:///{tmp_path / 'store.db'}")
    yield engine
    engine.dispose()


def test_backup_is_a_consistent_copy_while_another_writer_runs(tmp_path, sqlite_engine, small_assessment):
    payloads = [small_assessment.payload.model_copy(update={"uuid": uuid4()})
                for _ in range(6)]
    insert_assessment(sqlite_engine, payloads[0])
    writer = threading.Thread(target=lambda: [insert_assessment(sqlite_engine, p) for p in payloads[1:]])
    writer.start()
    copy = backup_to(sqlite_engine, tmp_path / "backup" / "copy.db")
    writer.join()
    # SQLite's own check on the copy, through the standard library's sqlite3 (an independent reader)
    assert sqlite3.connect(copy).execute("PRAGMA integrity_check").fetchone() == ("ok",)
    backup = make_engine(f"sqlite:///{copy}")
    stored = list_assessments(backup)["uuid"].tolist()
    assert 1 <= len(stored) <= 6
    for uuid in stored:  # every assessment in the copy is complete
        assert load_payload(backup, uuid) == next(p for p in payloads if str(p.uuid) == uuid)
    backup.dispose()


def test_backup_refuses_to_overwrite(tmp_path, sqlite_engine):
    (tmp_path / "taken.db").write_text("")
    with pytest.raises(FileExistsError, match="taken.db exists"):
        backup_to(sqlite_engine, tmp_path / "taken.db")


def test_check_reports_integrity_and_counts(sqlite_engine, small_assessment):
    insert_assessment(sqlite_engine, small_assessment.payload)
    report = check_store(sqlite_engine)
    assert report.ok and report.integrity == "ok"
    assert report.counts["assessments"] == 1
    assert report.counts["inner_scores"] == len(small_assessment.payload.inner_scores.score)
