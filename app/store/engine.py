"""Where the store lives and how to open it: URLs, the engine with its SQLite settings, migrations.

SQLite (a file, the default) and PostgreSQL (``postgresql+psycopg://...``, the ``postgres`` extra) are
the backends the tests run on.
"""

from __future__ import annotations

import sqlite3
import time
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path

from alembic import command
from alembic.config import Config
from sqlalchemy import Connection, Engine, create_engine, event, func, make_url, select

_MIGRATIONS = Path(__file__).parent / "migrations"
# busy_timeout first, so that switching a fresh file to WAL waits for a concurrent opener instead of failing.
_BUSY_SECONDS = 30
_SQLITE_PRAGMAS = (f"busy_timeout={_BUSY_SECONDS * 1000}", "journal_mode=WAL", "foreign_keys=ON",
                   "synchronous=NORMAL")
_AUTOCHECKPOINT_PAGES = 1000  # SQLite's own default, restored after a deferred checkpoint
_WRITE_LOCK = "foldwise_write_lock"
_MIGRATION_LOCK = 0x666F6C6477697365  # "foldwise" in ASCII: the key of PostgreSQL's advisory lock


def db_url_from(value: str) -> str:
    """A SQLAlchemy URL for ``value``: a URL (anything with ``://``) as is, a file path as SQLite.

    The parent folder of a path is created, so a fresh location works at once.
    """
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"a store location must be a file path or a SQLAlchemy URL such as "
                         f"'sqlite:///runs.db' or 'postgresql://host/db'; received {value!r}")
    if "://" in value:
        return value
    path = Path(value).expanduser().resolve()
    path.parent.mkdir(parents=True, exist_ok=True)
    return f"sqlite:///{path}"


def default_db_url(environ: Mapping[str, str]) -> str:
    """``FOLDWISE_DB`` (a path or URL) if set, else ``foldwise/foldwise.db`` in the XDG data folder."""
    if environ.get("FOLDWISE_DB"):
        return db_url_from(environ["FOLDWISE_DB"])
    data_home = environ.get("XDG_DATA_HOME", "")
    if not Path(data_home).is_absolute():  # the XDG base directory spec ignores relative paths
        data_home = Path(environ.get("HOME") or Path.home()) / ".local" / "share"
    return db_url_from(str(Path(data_home) / "foldwise" / "foldwise.db"))


def make_engine(url: str) -> Engine:
    """An engine for ``url`` whose schema is migrated to the newest revision.

    On SQLite every connection gets WAL journaling (readers never wait for the writer), foreign keys
    (for the cascades), a 30 s busy timeout and ``synchronous=NORMAL``; SQLAlchemy then emits BEGIN
    itself, so a transaction covers reads and DDL too. On PostgreSQL the upgrade holds an advisory lock,
    so engines opening a fresh database at once queue as they do on SQLite (Alembic's own state is not
    safe to share between threads either). Safe to call again on a migrated store.
    """
    try:
        engine = create_engine(url)
    except ModuleNotFoundError as error:
        raise ModuleNotFoundError(
            f"the store {make_url(url).render_as_string(hide_password=True)} needs the database driver "
            f"{error.name!r}, which is not installed; for PostgreSQL use a postgresql+psycopg:// URL and "
            f"pip install 'foldwise[postgres]'", name=error.name) from error
    if engine.dialect.name == "sqlite":
        event.listen(engine, "connect", _prepare_sqlite_connection)
        event.listen(engine, "begin", _begin_sqlite_transaction)
    with write_transaction(engine) as connection:
        if engine.dialect.name == "postgresql":
            connection.execute(select(func.pg_advisory_xact_lock(_MIGRATION_LOCK)))
        config = Config()
        config.set_main_option("script_location", str(_MIGRATIONS).replace("%", "%%"))
        config.attributes["connection"] = connection
        command.upgrade(config, "head")
    return engine


@contextmanager
def write_transaction(engine: Engine, *, defer_checkpoint: bool = False,
                      own_references: bool = False) -> Iterator[Connection]:
    """A connection in a transaction that commits on success, on SQLite holding the write lock from its start.

    There the transaction begins IMMEDIATE, so two writers queue (within the busy timeout) instead
    of one failing when it turns from reading to writing. PostgreSQL needs no such lock: its row locks
    and unique constraints let writers run side by side.

    With ``defer_checkpoint`` the commit on SQLite leaves the write-ahead log for ``checkpoint`` to copy
    into the database file later (committed and readable at once all the same), instead of copying it
    there and then: for a large assessment that copy is a second write of every page.

    With ``own_references`` the caller writes only rows whose foreign keys point at rows it wrote in this
    same transaction, under the write lock, so SQLite skips checking them row by row (a tenth of the time
    of storing 600,000 inner scores). PostgreSQL checks them as ever.
    """
    with engine.connect() as connection:
        connection.execution_options(**{_WRITE_LOCK: True})
        sqlite = connection.connection.driver_connection if engine.dialect.name == "sqlite" else None
        if sqlite is not None:  # pragmas set outside the transaction: inside one SQLite ignores foreign_keys
            sqlite.execute(f"PRAGMA wal_autocheckpoint={0 if defer_checkpoint else _AUTOCHECKPOINT_PAGES}")
            sqlite.execute(f"PRAGMA foreign_keys={'OFF' if own_references else 'ON'}")
        try:
            with connection.begin():
                yield connection
        finally:
            if sqlite is not None:
                sqlite.execute(f"PRAGMA wal_autocheckpoint={_AUTOCHECKPOINT_PAGES}")
                sqlite.execute("PRAGMA foreign_keys=ON")


def checkpoint(engine: Engine) -> None:
    """Copy what the SQLite write-ahead log holds into the database file, waiting for no reader or writer
    (a PASSIVE checkpoint: what a reader still needs stays in the log for the next one). Nothing to do on
    other backends."""
    if engine.dialect.name != "sqlite":
        return
    with engine.connect() as connection:
        connection.connection.driver_connection.execute("PRAGMA wal_checkpoint(PASSIVE)")


def _prepare_sqlite_connection(dbapi_connection, _record) -> None:
    dbapi_connection.isolation_level = None  # turn off the driver's own BEGIN; see the begin listener
    cursor = dbapi_connection.cursor()
    for pragma in _SQLITE_PRAGMAS:
        if pragma.startswith("journal_mode="):
            _switch_to_wal(cursor)
        else:
            cursor.execute(f"PRAGMA {pragma}")
    cursor.close()


def _switch_to_wal(cursor) -> None:
    """Put the file in WAL mode, waiting out other openers doing the same.

    The mode is kept in the file, so an opened store needs nothing. On a fresh file, SQLite may answer a
    concurrent switch with "database is locked" at once, without its busy handler (seen as 1 opener in
    4 failing on a quarter of the tries): try again for as long as the busy timeout would have waited.
    """
    deadline = time.monotonic() + _BUSY_SECONDS
    while True:
        try:
            if cursor.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                cursor.execute("PRAGMA journal_mode=WAL")
            return
        except sqlite3.OperationalError as error:
            if "locked" not in str(error) or time.monotonic() > deadline:
                raise
            time.sleep(0.01)


def _begin_sqlite_transaction(connection: Connection) -> None:
    immediate = connection.get_execution_options().get(_WRITE_LOCK, False)
    connection.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")
