"""Reading back what the payload carried as it was: outer folds, predictions, the whole payload."""

from __future__ import annotations

import base64
from dataclasses import dataclass

import numpy as np
from sqlalchemy import Connection, Double, Engine, Row, Table, and_, select

from foldwise.payload import (
    AssessmentPayload,
    Configuration,
    Failure,
    Family,
    FinalSelection,
    FittedModel,
    FoldChoice,
    InnerScores,
    OuterFold,
    OuterScores,
    Prediction,
)
from foldwise.store import tables
from foldwise.store.lookup import find_assessment, require_assessment
from foldwise.store.queries import AssessmentRecord, configurations_of, record_from


@dataclass(frozen=True, eq=False)
class StoredPrediction:
    """One configuration's outer-test predictions in one outer fold, rows in the fold's test order."""

    repeat: int
    outer_fold: int
    config: str
    kind: str
    values: np.ndarray  # float64, shape (n_test, n_columns)


def outer_folds_for(engine: Engine, uuid: str) -> list[OuterFold]:
    """The outer folds in payload order, with their test indices and true targets."""
    with engine.connect() as connection:
        return _outer_folds(connection, require_assessment(connection, uuid).id)


def fold_targets_for(engine: Engine, uuid: str) -> list[tuple[int, int, list | None]]:
    """(repeat, outer_fold, true targets of its test rows or None) per outer fold, in payload order: what
    scoring predictions needs of the folds, without their test indices."""
    with engine.connect() as connection:
        return fold_targets_in(connection, require_assessment(connection, uuid).id)


def fold_targets_in(connection: Connection, assessment_id: int) -> list[tuple[int, int, list | None]]:
    o = tables.outer_folds
    return [tuple(fold) for fold in connection.execute(
        select(o.c.repeat, o.c.outer_fold, o.c.y_true).where(o.c.assessment_id == assessment_id)
        .order_by(o.c.position)).all()]


def predictions_for(engine: Engine, uuid: str, *, configs: list[str] | None = None) -> list[StoredPrediction]:
    """The outer-test predictions in payload order, of every configuration or of the ids in ``configs``."""
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        return predictions_in(connection, row, configurations_of(connection, row.id), configs)


def predictions_in(connection: Connection, row: Row, configurations: list[Configuration],
                   configs: list[str] | None) -> list[StoredPrediction]:
    """``predictions_for`` on an open connection, for the assessment ``row`` with these configurations."""
    p, c = tables.predictions, tables.configurations
    query = (select(p.c.position, p.c.repeat, p.c.outer_fold, c.c.config_id, p.c.kind, p.c.n_columns, p.c.data)
             .join(c, and_(c.c.assessment_id == p.c.assessment_id, c.c.position == p.c.config))
             .where(p.c.assessment_id == row.id))
    if configs is None:
        query = query.order_by(p.c.position)
    else:
        _refuse_unknown_configs(row, configurations, configs)
        # Ordered here, not by the query: ORDER BY position would lead SQLite to walk every block of
        # the assessment in that order rather than take the few it needs by the configuration index.
        wanted = set(configs)
        query = query.where(p.c.config.in_([position for position, config in enumerate(configurations)
                                            if config.id in wanted]))
    rows = connection.execute(query).all()
    if configs is not None:
        rows.sort(key=lambda stored: stored.position)
    return [StoredPrediction(repeat=r, outer_fold=o, config=config, kind=kind, values=_floats(data, n_columns))
            for _, r, o, config, kind, n_columns, data in rows]


def load_payload(engine: Engine, uuid: str) -> AssessmentPayload | None:
    """The payload exactly as it was stored, or None when the store has no assessment with that uuid."""
    with engine.connect() as connection:
        row = find_assessment(connection, uuid)
        return None if row is None else payload_in(connection, row, record_from(connection, row))


def payload_in(connection: Connection, row: Row, record: AssessmentRecord) -> AssessmentPayload:
    """``load_payload`` on an open connection, for the assessment ``row`` whose record is ``record``."""
    ch, p, f, m = tables.fold_choices, tables.predictions, tables.failures, tables.fitted_models

    def rows(table: Table, names: list[str], *where) -> list[Row]:
        return _rows(connection, table, row.id, names, *where)

    def choices(kind: str) -> list[FoldChoice]:
        return [FoldChoice(**choice._mapping)
                for choice in rows(ch, ["repeat", "outer_fold", "config"], ch.c.kind == kind)]

    return AssessmentPayload(
        schema_version=row.schema_version, uuid=row.uuid, name=row.name, dataset=row.dataset,
        created_at=record.created_at, design=record.design, families=_families(connection, row.id),
        configurations=record.configurations, outer_folds=_outer_folds(connection, row.id),
        inner_scores=InnerScores(**_columns(connection, tables.inner_scores, row.id)),
        outer_scores=OuterScores(**_columns(connection, tables.outer_scores, row.id)),
        family_winners=choices("family"), overall_winners=choices("overall"),
        predictions=[Prediction(repeat=r, outer_fold=o, config=c, kind=kind, n_columns=n_columns, data=data)
                     for r, o, c, kind, n_columns, data in rows(p, tables.payload_fields(p))],
        failures=[Failure(**failure._mapping) for failure in rows(f, tables.payload_fields(f))],
        models=[FittedModel(repeat=r, outer_fold=o, config=c, skops=_text(data))
                for r, o, c, data in rows(m, tables.payload_fields(m))],
        final=_final(connection, row.id), versions=row.versions, seeds=row.seeds,
        total_fit_time=row.total_fit_time)


def _final(connection: Connection, assessment_id: int) -> FinalSelection | None:
    f = tables.final_selections
    found = connection.execute(select(f.c.selection, f.c.model).where(f.c.assessment_id == assessment_id)).first()
    return None if found is None else FinalSelection(**found.selection, model_skops=_text(found.model))


@dataclass(frozen=True)
class StoredFinal:
    """The final selection as stored, without its model file (read that with ``final_model_for``)."""

    selection: FinalSelection  # model_skops is None here
    has_model: bool  # the chosen configuration's refit on every row was kept


def final_selection_for(engine: Engine, uuid: str) -> StoredFinal | None:
    """The final selection on every row, or None when the run made none; the model's bytes stay in the store."""
    with engine.connect() as connection:
        return final_selection_in(connection, require_assessment(connection, uuid).id)


def final_selection_in(connection: Connection, assessment_id: int) -> StoredFinal | None:
    f = tables.final_selections
    found = connection.execute(select(f.c.selection, f.c.model.is_not(None).label("has_model"))
                               .where(f.c.assessment_id == assessment_id)).first()
    return None if found is None else StoredFinal(FinalSelection(**found.selection), bool(found.has_model))


def final_model_for(engine: Engine, uuid: str) -> bytes | None:
    """The skops file of the final selection's refit model; None when the run made none or kept none."""
    with engine.connect() as connection:
        return final_model_in(connection, require_assessment(connection, uuid).id)


def final_model_in(connection: Connection, assessment_id: int) -> bytes | None:
    f = tables.final_selections
    return connection.scalar(select(f.c.model).where(f.c.assessment_id == assessment_id))


def _families(connection: Connection, assessment_id: int) -> list[Family]:
    names = tables.payload_fields(tables.families)
    return [Family(**dict(family._mapping, estimator_skops=_text(family.estimator_skops)))
            for family in _rows(connection, tables.families, assessment_id, names)]


def _text(data: bytes | None) -> str | None:
    return None if data is None else base64.b64encode(data).decode("ascii")


def _outer_folds(connection: Connection, assessment_id: int) -> list[OuterFold]:
    names = ["repeat", "outer_fold", "n_train", "test_indices", "y_true"]
    return [OuterFold(repeat=r, outer_fold=o, n_train=n_train, y_true=y_true,
                      test_indices=np.frombuffer(indices, dtype="<i8").tolist())
            for r, o, n_train, indices, y_true in _rows(connection, tables.outer_folds, assessment_id, names)]


def _columns(connection: Connection, table: Table, assessment_id: int) -> dict[str, np.ndarray]:
    """A score block back in the payload's columnar form: int64 positions, float64 with NaN for NULL."""
    names = tables.payload_fields(table)
    rows = _rows(connection, table, assessment_id, names)
    values = zip(*rows, strict=True) if rows else ([] for _ in names)
    return {name: np.array(column, dtype=float if isinstance(table.c[name].type, Double) else np.int64)
            for name, column in zip(names, values, strict=True)}


def _rows(connection: Connection, table: Table, assessment_id: int, names: list[str], *where) -> list[Row]:
    """The named columns of an assessment's rows of ``table``, in payload order."""
    return connection.execute(select(*(table.c[name] for name in names))
                              .where(table.c.assessment_id == assessment_id, *where)
                              .order_by(table.c.position)).all()


def _floats(data: bytes, n_columns: int) -> np.ndarray:
    """Raw little-endian float64 as a writable native array of ``n_columns`` columns."""
    return np.frombuffer(data, dtype="<f8").astype(np.float64).reshape(-1, n_columns)


def _refuse_unknown_configs(row: Row, configurations: list[Configuration], configs: list[str]) -> None:
    known = {config.id for config in configurations}
    unknown = [config for config in configs if config not in known]
    if unknown:
        raise ValueError(f"configs {unknown} are not configurations of assessment {row.uuid}; "
                         f"its {len(known)} configuration ids are in get_assessment(...).configurations")
