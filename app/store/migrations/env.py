"""Alembic's entry point for foldwise's migrations, run by ``foldwise.store.make_engine``.

``make_engine`` hands over an open connection in ``config.attributes``, so any URL works (a file, an
in-memory SQLite, PostgreSQL) and the upgrade shares that connection's transaction.
"""

from alembic import context

connection = context.config.attributes.get("connection")
if connection is None:
    raise RuntimeError("foldwise's migrations need an open connection in config.attributes['connection']; "
                       "run them through foldwise.store.make_engine(url)")
context.configure(connection=connection)
with context.begin_transaction():
    context.run_migrations()
