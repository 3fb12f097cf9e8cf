"""A uuid is one assessment in the store, on SQLite and PostgreSQL: the same content again is not stored
twice, other content under the uuid raises ``UuidConflict``, and the digest of an assessment stored
before digests were kept is worked out from its rows (JSON columns read back from either backend)."""

from __future__ import annotations

import pytest
from sqlalchemy import select, update

from foldwise.identity import content_digest
from foldwise.store import UuidConflict, insert_assessment, tables


def _stored_digest(engine, uuid) -> str | None:
    with engine.connect() as connection:
        return connection.scalar(select(tables.assessments.c.content_digest)
                                 .where(tables.assessments.c.uuid == str(uuid)))


def _forget_digest(engine, uuid) -> None:
    with engine.begin() as connection:
        connection.execute(update(tables.assessments).where(tables.assessments.c.uuid == str(uuid))
                           .values(content_digest=None))


def test_the_same_content_is_stored_once_and_other_content_is_a_conflict(engine, make_payload):
    payload = make_payload()
    assert insert_assessment(engine, payload) is True
    assert _stored_digest(engine, payload.uuid) == content_digest(payload)
    assert insert_assessment(engine, payload.model_copy(deep=True)) is False
    changed = payload.model_copy(update={"dataset": "another data set"})
    with pytest.raises(UuidConflict, match=f"assessment {payload.uuid} is already stored with different content"):
        insert_assessment(engine, changed)
    assert _stored_digest(engine, payload.uuid) == content_digest(payload)


def test_a_digest_missing_from_an_older_store_is_worked_out_from_the_rows(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    _forget_digest(engine, payload.uuid)
    assert insert_assessment(engine, payload) is False  # params with keys in several orders, nulls, lists
    assert _stored_digest(engine, payload.uuid) == content_digest(payload)
    _forget_digest(engine, payload.uuid)
    with pytest.raises(UuidConflict):
        insert_assessment(engine, payload.model_copy(update={"total_fit_time": payload.total_fit_time + 1}))
