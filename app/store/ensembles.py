"""Saved ensembles of an assessment's configurations, and the skops files ensembles are built from."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from uuid import UUID, uuid4

import pandas as pd
from sqlalchemy import Connection, Engine, Row, and_, delete, func, insert, select

from foldwise.payload import Configuration
from foldwise.store import tables
from foldwise.store.engine import write_transaction
from foldwise.store.lookup import require_assessment
from foldwise.store.queries import configurations_of

MEMBER_COLUMNS = ["ensemble_id", "ensemble", "note", "created_at", "voting", "metric", "estimate_mean",
                  "estimate_sd", "member", "family", "config", "params"]


@dataclass(frozen=True)
class EnsembleRecord:
    """A saved ensemble: its members (configuration ids, in the order given) and its estimate when saved.

    ``estimate_mean`` and ``estimate_sd`` are over the outer folds on ``metric``; None where undefined.
    """

    id: str
    assessment_uuid: str
    name: str
    note: str
    created_at: datetime  # UTC
    voting: str
    metric: str
    estimate_mean: float | None
    estimate_sd: float | None
    members: list[str]


@dataclass(frozen=True)
class StoredModel:
    """A fold winner as fitted on its outer training set: a skops file, to be loaded with a trusted list."""

    repeat: int
    outer_fold: int
    config: str
    skops: bytes


def insert_ensemble(engine: Engine, uuid: str, *, name: str, note: str, members: list[str], voting: str,
                    metric: str, estimate_mean: float | None, estimate_sd: float | None) -> EnsembleRecord:
    """Save an ensemble of the assessment's configurations, in one transaction; returns it with its new id."""
    with write_transaction(engine) as connection:
        row = require_assessment(connection, uuid)
        ensemble_id = insert_ensemble_in(connection, row, configurations_of(connection, row.id), name=name,
                                         note=note, members=members, voting=voting, metric=metric,
                                         estimate_mean=estimate_mean, estimate_sd=estimate_sd)
    return get_ensemble(engine, ensemble_id)


def insert_ensemble_in(connection: Connection, row: Row, configurations: list[Configuration], *, name: str,
                       note: str, members: list[str], voting: str, metric: str, estimate_mean: float | None,
                       estimate_sd: float | None) -> str:
    """``insert_ensemble`` in an open write transaction, for the assessment ``row``; returns the new id."""
    if not isinstance(name, str) or not name.strip() or len(name) > 200:
        raise ValueError(f"an ensemble needs a name of 1 to 200 characters; received {name!r}")
    if not isinstance(note, str) or len(note) > 5_000:
        raise ValueError(f"an ensemble's note must be text of at most 5000 characters; received "
                         f"{type(note).__name__} of length {len(note) if isinstance(note, str) else '?'}")
    if not members or len(set(members)) != len(members):
        raise ValueError(f"an ensemble needs distinct configuration ids as members; received {members!r}")
    positions = _config_positions(row, configurations, members)
    ensemble_id = str(uuid4())
    connection.execute(insert(tables.ensembles).values(
        id=ensemble_id, assessment_id=row.id, name=name.strip(), note=note,
        created_at=datetime.now(UTC).replace(tzinfo=None), voting=voting, metric=metric,
        estimate_mean=estimate_mean, estimate_sd=estimate_sd))
    connection.execute(insert(tables.ensemble_members), [
        {"ensemble_id": ensemble_id, "position": i, "config": c} for i, c in enumerate(positions)])
    return ensemble_id


def get_ensemble(engine: Engine, ensemble_id: str) -> EnsembleRecord | None:
    """The saved ensemble, or None when the store has none with that id (or the id is not a uuid)."""
    with engine.connect() as connection:
        return ensemble_in(connection, ensemble_id)


def ensemble_in(connection: Connection, ensemble_id: str) -> EnsembleRecord | None:
    """``get_ensemble`` on an open connection."""
    if not _is_uuid(ensemble_id):
        return None
    found = _records(connection, tables.ensembles.c.id == str(UUID(ensemble_id)))
    return found[0] if found else None


def ensembles_for(engine: Engine, uuid: str) -> list[EnsembleRecord]:
    """The assessment's saved ensembles, oldest first."""
    with engine.connect() as connection:
        return ensembles_in(connection, require_assessment(connection, uuid).id)


def ensembles_in(connection: Connection, assessment_id: int) -> list[EnsembleRecord]:
    return _records(connection, tables.ensembles.c.assessment_id == assessment_id)


def ensemble_counts(engine: Engine) -> dict[str, int]:
    """How many saved ensembles each assessment has, by assessment uuid (absent: none)."""
    with engine.connect() as connection:
        return ensemble_counts_in(connection)


def ensemble_counts_in(connection: Connection) -> dict[str, int]:
    e, a = tables.ensembles, tables.assessments
    rows = connection.execute(select(a.c.uuid, func.count(e.c.id)).join(e, e.c.assessment_id == a.c.id)
                              .group_by(a.c.uuid)).all()
    return {uuid: int(count) for uuid, count in rows}


def delete_ensemble(engine: Engine, ensemble_id: str) -> bool:
    """Remove a saved ensemble and its member rows; True when there was one to remove."""
    if not _is_uuid(ensemble_id):
        return False
    with write_transaction(engine) as connection:
        result = connection.execute(delete(tables.ensembles)
                                    .where(tables.ensembles.c.id == str(UUID(ensemble_id))))
    return result.rowcount > 0


def ensemble_members_for(engine: Engine, uuid: str) -> pd.DataFrame:
    """One row per saved ensemble and member (columns ``MEMBER_COLUMNS``), for the CSV export."""
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        return members_frame(configurations_of(connection, row.id), ensembles_in(connection, row.id))


def members_frame(configurations: list[Configuration], records: list[EnsembleRecord]) -> pd.DataFrame:
    """``ensemble_members_for`` of these saved ensembles of an assessment with these configurations."""
    configs = {config.id: config for config in configurations}
    rows = [[record.id, record.name, record.note, record.created_at, record.voting, record.metric,
             record.estimate_mean, record.estimate_sd, position, configs[member].family, member,
             configs[member].params]
            for record in records for position, member in enumerate(record.members)]
    return pd.DataFrame(rows, columns=MEMBER_COLUMNS)


def family_estimators_for(engine: Engine, uuid: str) -> dict[str, bytes | None]:
    """Each family's unfitted estimator as the runner stored it (a skops file), None where not kept."""
    f = tables.families
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        rows = connection.execute(select(f.c.name, f.c.estimator_skops).where(f.c.assessment_id == row.id)
                                  .order_by(f.c.position)).all()
    return {name: data for name, data in rows}


def fitted_models_for(engine: Engine, uuid: str, *, configs: list[str]) -> list[StoredModel]:
    """The kept fitted fold winners of the configurations ``configs``, in payload order."""
    with engine.connect() as connection:
        row = require_assessment(connection, uuid)
        return fitted_models_in(connection, row, configurations_of(connection, row.id), configs)


def fitted_models_in(connection: Connection, row: Row, configurations: list[Configuration],
                     configs: list[str]) -> list[StoredModel]:
    """``fitted_models_for`` on an open connection, for the assessment ``row`` with these configurations."""
    m, c = tables.fitted_models, tables.configurations
    _config_positions(row, configurations, configs)
    rows = connection.execute(
        select(m.c.repeat, m.c.outer_fold, c.c.config_id, m.c.skops)
        .join(c, and_(c.c.assessment_id == m.c.assessment_id, c.c.position == m.c.config))
        .where(m.c.assessment_id == row.id, c.c.config_id.in_(configs)).order_by(m.c.position)).all()
    return [StoredModel(repeat=r, outer_fold=o, config=config, skops=data) for r, o, config, data in rows]


def fitted_model_counts(engine: Engine, uuid: str) -> dict[str, int]:
    """How many kept fitted fold winners each configuration id has (absent: none)."""
    with engine.connect() as connection:
        return fitted_model_counts_in(connection, require_assessment(connection, uuid).id)


def fitted_model_counts_in(connection: Connection, assessment_id: int) -> dict[str, int]:
    m, c = tables.fitted_models, tables.configurations
    rows = connection.execute(
        select(c.c.config_id, func.count()).select_from(m)
        .join(c, and_(c.c.assessment_id == m.c.assessment_id, c.c.position == m.c.config))
        .where(m.c.assessment_id == assessment_id).group_by(c.c.config_id)).all()
    return {config: int(count) for config, count in rows}


def _records(connection: Connection, where) -> list[EnsembleRecord]:
    e, m, c, a = tables.ensembles, tables.ensemble_members, tables.configurations, tables.assessments
    heads = connection.execute(select(e, a.c.uuid.label("assessment_uuid"))
                               .join(a, a.c.id == e.c.assessment_id)
                               .where(where).order_by(e.c.created_at, e.c.id)).all()
    if not heads:
        return []
    members = connection.execute(
        select(m.c.ensemble_id, c.c.config_id)
        .join(e, e.c.id == m.c.ensemble_id)
        .join(c, and_(c.c.assessment_id == e.c.assessment_id, c.c.position == m.c.config))
        .where(m.c.ensemble_id.in_([head.id for head in heads]))
        .order_by(m.c.ensemble_id, m.c.position)).all()
    by_ensemble: dict[str, list[str]] = {}
    for ensemble_id, config in members:
        by_ensemble.setdefault(ensemble_id, []).append(config)
    return [_record(head, by_ensemble.get(head.id, [])) for head in heads]


def _record(head: Row, members: list[str]) -> EnsembleRecord:
    return EnsembleRecord(id=head.id, assessment_uuid=head.assessment_uuid, name=head.name, note=head.note,
                          created_at=head.created_at.replace(tzinfo=UTC), voting=head.voting,
                          metric=head.metric,
                          estimate_mean=head.estimate_mean, estimate_sd=head.estimate_sd, members=members)


def _config_positions(row: Row, configurations: list[Configuration], members: list[str]) -> list[int]:
    positions = {config.id: i for i, config in enumerate(configurations)}
    unknown = [member for member in members if member not in positions]
    if unknown:
        raise ValueError(f"{unknown} are not configurations of assessment {row.uuid}; its "
                         f"{len(positions)} configuration ids are in get_assessment(...).configurations")
    return [positions[member] for member in members]


def _is_uuid(text) -> bool:
    try:
        UUID(str(text))
    except ValueError:
        return False
    return True
