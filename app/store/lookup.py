"""Finding an assessment by its uuid, and the one spelling of that uuid in the store."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone
from uuid import UUID

from sqlalchemy import Connection, Row, select

from foldwise.store import tables


class AssessmentNotFound(LookupError):
    """No assessment with the given uuid is in the store."""


def uuid_text(uuid: str | UUID) -> str:
    """``uuid`` in canonical form (lower case, hyphenated), refusing anything that is not a uuid."""
    if isinstance(uuid, UUID):
        return str(uuid)
    try:
        return str(UUID(str(uuid)))
    except ValueError:
        raise ValueError(f"an assessment uuid must be 32 hex digits such as "
                         f"'3f2b8c1e-5d4a-4e7b-9c0d-1a2b3c4d5e6f'; received {uuid!r}") from None


def find_assessment(connection: Connection, uuid: str | UUID) -> Row | None:
    """The assessment's row, or None when the store has no assessment with that uuid."""
    return connection.execute(select(tables.assessments)
                              .where(tables.assessments.c.uuid == uuid_text(uuid))).first()


def require_assessment(connection: Connection, uuid: str | UUID) -> Row:
    """The assessment's row; AssessmentNotFound when there is none."""
    row = find_assessment(connection, uuid)
    if row is None:
        raise AssessmentNotFound(f"no assessment with uuid {uuid_text(uuid)} in this store; "
                                 f"list_assessments(engine) shows the ones it holds")
    return row


def created_at_of(row: Row) -> datetime:
    """The payload's ``created_at`` again: stored as UTC wall time plus the original offset."""
    if row.utc_offset is None:
        return row.created_at
    zone = UTC if row.utc_offset == 0 else timezone(timedelta(seconds=row.utc_offset))
    return row.created_at.replace(tzinfo=UTC).astimezone(zone)
