"""Writing assessments: one transaction per assessment, bulk inserts built column by column."""

from __future__ import annotations

import base64
import math
from collections.abc import Iterable, Sequence
from datetime import UTC
from itertools import islice, repeat

import numpy as np
from pydantic import ValidationError
from sqlalchemy import Connection, Double, Engine, Integer, LargeBinary, String, Table, delete, insert, select, update
from sqlalchemy.exc import IntegrityError

from foldwise.definitions import NestedEstimate, nested_estimate
from foldwise.identity import content_digest
from foldwise.packed import nullable_list
from foldwise.payload import AssessmentPayload
from foldwise.store import tables
from foldwise.store.engine import write_transaction
from foldwise.store.lookup import uuid_text
from foldwise.store.restore import load_payload
from foldwise.store.summaries import inner_summary_columns

_CHUNK = 20_000  # rows per executemany: bounded memory for an assessment of any size


class UuidConflict(ValueError):
    """The store holds another assessment under the payload's uuid: a uuid names one assessment."""

    def __init__(self, uuid: str, reason: str):
        super().__init__(f"assessment {uuid} is already stored with different content ({reason}); a uuid names "
                         "one assessment: push the new one under a new uuid, or delete the stored one first")
        self.uuid, self.reason = uuid, reason


def insert_assessment(engine: Engine, payload: AssessmentPayload, *, defer_checkpoint: bool = False) -> bool:
    """Store ``payload``; True when newly stored, False when the same assessment is already stored.

    The same assessment is the same uuid with the same content (``foldwise.identity.content_digest``);
    the same uuid with other content raises ``UuidConflict``. All rows go in one transaction, so no
    reader ever sees half an assessment. The assessment row goes first: the uuid's unique constraint
    then settles a race between two writers of one assessment (the second waits for the first and finds
    the uuid taken), on any backend. With ``defer_checkpoint``, see ``write_transaction``: the caller
    runs ``checkpoint`` afterwards.
    """
    digest = content_digest(payload)
    try:
        with write_transaction(engine, defer_checkpoint=defer_checkpoint, own_references=True) as connection:
            assessment_id = connection.execute(insert(tables.assessments).values(
                **_assessment_row(payload), content_digest=digest)).inserted_primary_key[0]
            _insert_children(connection, assessment_id, payload)
    except IntegrityError:
        stored = _stored_digest(engine, str(payload.uuid))
        if stored is None:
            raise
        if stored != digest:
            raise UuidConflict(str(payload.uuid), "its content digest differs") from None
        return False
    return True


def delete_assessment(engine: Engine, uuid: str) -> bool:
    """Remove an assessment and, by cascade, all its rows; True when there was one to remove."""
    with write_transaction(engine) as connection:
        result = connection.execute(delete(tables.assessments)
                                    .where(tables.assessments.c.uuid == uuid_text(uuid)))
    return result.rowcount > 0


def _stored_digest(engine: Engine, uuid: str) -> str | None:
    """The content digest of the assessment stored under ``uuid``; None when there is none.

    An assessment stored before digests were kept (migration 0005) gets its digest now, from its rows
    read back as a payload, and keeps it; one that today's consistency rules refuse cannot be compared,
    and counts as different (``UuidConflict`` says so).
    """
    a = tables.assessments
    with engine.connect() as connection:
        row = connection.execute(select(a.c.id, a.c.content_digest).where(a.c.uuid == uuid)).first()
    if row is None or row.content_digest is not None:
        return None if row is None else row.content_digest
    try:
        digest = content_digest(load_payload(engine, uuid))
    except ValidationError:
        raise UuidConflict(uuid, "it was stored before content digests were kept, and today's consistency "
                           "rules refuse it, so the two cannot be compared") from None
    with write_transaction(engine) as connection:
        connection.execute(update(a).where(a.c.id == row.id, a.c.content_digest.is_(None))
                           .values(content_digest=digest))
    return digest


def _assessment_row(payload: AssessmentPayload) -> dict:
    design, created = payload.design, payload.created_at
    offset = created.utcoffset()
    estimate = nested_estimate_of(payload)
    return {
        "uuid": str(payload.uuid), "name": payload.name, "dataset": payload.dataset,
        "created_at": created if offset is None else created.astimezone(UTC).replace(tzinfo=None),
        "utc_offset": None if offset is None else int(offset.total_seconds()),
        "schema_version": payload.schema_version, "task": design.task, "n_repeats": design.n_repeats,
        "n_outer_folds": design.n_outer_folds, "n_inner_folds": design.n_inner_folds,
        "n_configs": len(payload.configurations), "selection_metric": design.selection_metric,
        "design": design.model_dump(mode="json"), "versions": payload.versions, "seeds": payload.seeds,
        "fingerprint": payload.fingerprint(), "total_fit_time": payload.total_fit_time,
        "estimate_mean": _or_none(estimate.mean), "estimate_sd": _or_none(estimate.sd),
        "estimate_n_used": estimate.n_used, "estimate_low": _or_none(estimate.interval.low),
        "estimate_high": _or_none(estimate.interval.high),
        "n_inner_scores": len(payload.inner_scores), "n_outer_scores": len(payload.outer_scores),
        "n_failures": len(payload.failures),
    }


def nested_estimate_of(payload: AssessmentPayload) -> NestedEstimate:
    """The nested estimate (``foldwise.definitions``) on the selection metric, its folds in (repeat, outer
    fold) order."""
    design, columns = payload.design, payload.outer_scores
    width = len(payload.configurations)
    chosen = np.array([(c.repeat * design.n_outer_folds + c.outer_fold) * width + c.config
                       for c in payload.overall_winners], dtype=np.int64)
    fold = columns.repeat * design.n_outer_folds + columns.outer_fold
    rows = np.flatnonzero((columns.metric == 0) & np.isin(fold * width + columns.config, chosen))
    rows = rows[np.argsort(fold[rows], kind="stable")]  # one winner per fold: (repeat, outer fold) order
    sizes = {(f.repeat, f.outer_fold): (f.n_train, len(f.test_indices)) for f in payload.outer_folds}
    folds = [divmod(int(position), design.n_outer_folds) for position in fold[rows]]
    return nested_estimate(columns.score[rows], n_folds=design.n_repeats * design.n_outer_folds,
                           n_train=[sizes[key][0] for key in folds], n_test=[sizes[key][1] for key in folds])


def _or_none(value: float) -> float | None:
    return None if math.isnan(value) else float(value)


def _insert_children(connection: Connection, assessment_id: int, payload: AssessmentPayload) -> None:
    def put(table: Table, columns: dict[str, Sequence]) -> None:
        _insert_columns(connection, table, assessment_id, columns)

    put(tables.families, _fields(payload.families, ["name", "estimator", "estimator_class"])
        | {"estimator_skops": [_bytes_or_none(f.estimator_skops) for f in payload.families]})
    put(tables.configurations, _fields(payload.configurations, ["family", "params"])
        | {"config_id": [c.id for c in payload.configurations]})
    folds = payload.outer_folds
    put(tables.outer_folds, _fields(folds, ["repeat", "outer_fold", "n_train", "y_true"]) | {
        "n_test": [len(f.test_indices) for f in folds],
        "test_indices": [np.asarray(f.test_indices, dtype="<i8").tobytes() for f in folds]})
    for table, block in ((tables.inner_scores, payload.inner_scores),
                         (tables.outer_scores, payload.outer_scores)):
        # NaN becomes NULL here, as SQL says "no score"; the reads give NaN back.
        put(table, {name: nullable_list(getattr(block, name)) for name in tables.payload_fields(table)})
    inner = payload.inner_scores
    summaries = inner_summary_columns(inner.repeat, inner.outer_fold, inner.config, inner.metric, inner.score)
    _insert_plain(connection, tables.inner_summaries,
                  {"assessment_id": repeat(assessment_id, len(summaries["repeat"]))} | summaries)
    for kind, choices in (("family", payload.family_winners), ("overall", payload.overall_winners)):
        put(tables.fold_choices, _fields(choices, ["repeat", "outer_fold", "config"])
            | {"kind": [kind] * len(choices)})
    predictions = payload.predictions
    put(tables.predictions, _fields(predictions, ["repeat", "outer_fold", "config", "kind", "n_columns"])
        | {"data": [p.data for p in predictions]})
    put(tables.fitted_models, _fields(payload.models, ["repeat", "outer_fold", "config"])
        | {"skops": [base64.b64decode(m.skops) for m in payload.models]})
    put(tables.failures, _fields(payload.failures, tables.payload_fields(tables.failures)))
    if payload.final is not None:
        final = payload.final
        connection.execute(insert(tables.final_selections).values(
            assessment_id=assessment_id, selection=final.model_dump(mode="json", exclude={"model_skops"}),
            model=_bytes_or_none(final.model_skops)))


def _bytes_or_none(text: str | None) -> bytes | None:
    return None if text is None else base64.b64decode(text)


def _fields(items: Sequence, names: list[str]) -> dict[str, list]:
    return {name: [getattr(item, name) for item in items] for name in names}


def _insert_columns(connection: Connection, table: Table, assessment_id: int,
                    columns: dict[str, Sequence]) -> None:
    """Executemany the rows of equal-length ``columns`` in chunks, numbered by their position."""
    size = len(next(iter(columns.values())))
    values = {"assessment_id": repeat(assessment_id, size), "position": range(size)} | columns
    if all(isinstance(column.type, Integer | Double | String | LargeBinary) for column in table.columns):
        _insert_plain(connection, table, values)
        return
    keys = list(values)
    rows = (dict(zip(keys, row, strict=True)) for row in zip(*values.values(), strict=True))
    while chunk := list(islice(rows, _CHUNK)):
        connection.execute(insert(table), chunk)


def _insert_plain(connection: Connection, table: Table, values: dict[str, Iterable]) -> None:
    """Rows of plain values straight to the driver, as tuples when its paramstyle is positional.

    Integers, floats, text, bytes and None need no conversion by SQLAlchemy, whose per-row parameter
    handling would otherwise take most of the time of a large assessment (scores, predictions).
    """
    statement = insert(table).compile(dialect=connection.dialect)
    keys = statement.positiontup if statement.positional else [column.name for column in table.columns]
    rows = zip(*(values[key] for key in keys), strict=True)
    if not statement.positional:
        rows = (dict(zip(keys, row, strict=True)) for row in rows)
    while chunk := list(islice(rows, _CHUNK)):
        connection.exec_driver_sql(statement.string, chunk)
