"""Keeping a store healthy: a consistent copy while the server runs, and an integrity check."""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import Engine, func, select

from foldwise.store.tables import metadata


@dataclass(frozen=True)
class CheckReport:
    ok: bool
    integrity: str  # "ok", or what the database's own check found
    counts: dict[str, int]  # rows per table


def backup_to(engine: Engine, destination: str | Path) -> Path:
    """Copy a SQLite store with SQLite's online backup API: consistent even while others write."""
    if engine.dialect.name != "sqlite":
        raise ValueError(f"backup copies SQLite stores; for {engine.dialect.name} use its own tools "
                         "(pg_dump for PostgreSQL)")
    destination = Path(destination)
    if destination.exists():
        raise FileExistsError(f"{destination} exists; choose a new file so no backup is overwritten")
    destination.parent.mkdir(parents=True, exist_ok=True)
    source = engine.raw_connection()
    try:
        target = sqlite3.connect(destination)
        try:
            source.driver_connection.backup(target)
        finally:
            target.close()
    finally:
        source.close()
    return destination


def check_store(engine: Engine) -> CheckReport:
    """Run the database's integrity check (SQLite's PRAGMA integrity_check) and count rows per table."""
    with engine.connect() as connection:
        if engine.dialect.name == "sqlite":
            rows = [row[0] for row in connection.exec_driver_sql("PRAGMA integrity_check")]
            integrity = "ok" if rows == ["ok"] else "; ".join(rows)
        else:
            integrity = "ok"  # PostgreSQL checks pages itself; a full check is amcheck's job
        counts = {table.name: connection.execute(select(func.count()).select_from(table)).scalar_one()
                  for table in metadata.sorted_tables}
    return CheckReport(integrity == "ok", integrity, counts)
