"""Reading stored assessments back into Python: ``foldwise.load`` and ``foldwise.assessments``."""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

import pandas as pd

from foldwise.assessment import Assessment


def load(store: str, uuid: str) -> Assessment:
    """The assessment ``uuid`` of the store at ``store`` (a path or SQLAlchemy URL), exactly as it was saved
    or pushed: its DataFrames equal those of the ``Assessment`` that was stored.

    Raises ``LookupError`` naming the store when it holds no such assessment (``foldwise.assessments``
    lists what it holds), and ``FileNotFoundError`` for a store file that does not exist.
    """
    from foldwise.store import load_payload

    with _engine(store) as engine:
        payload = load_payload(engine, str(uuid))
    if payload is None:
        raise LookupError(f"the store {store!r} holds no assessment {uuid}; foldwise.assessments({store!r}) "
                          "lists the ones it holds")
    return Assessment(payload)


def assessments(store: str, *, dataset: str | None = None, name: str | None = None) -> pd.DataFrame:
    """The assessments of a store, newest first, one row each: uuid, name, dataset, created_at, design, families,
    selection metric and the nested estimate with the outer folds it used (``estimate_n_used`` of
    ``estimate_n_folds``); ``dataset`` and ``name`` keep those containing a text (ignoring case)."""
    from foldwise.store import list_assessments

    with _engine(store) as engine:
        return list_assessments(engine, dataset=dataset, name=name)


@contextmanager
def _engine(store: str):
    from foldwise.store import db_url_from, make_engine

    if not isinstance(store, str | Path):
        raise TypeError(f"store must be a file path or a SQLAlchemy URL, received {type(store).__name__}")
    store = str(store)
    if "://" not in store and not Path(store).expanduser().exists():
        raise FileNotFoundError(f"no store at {store!r}: reading never creates one; pass the path a run was "
                                "saved to, or a SQLAlchemy URL")
    engine = make_engine(db_url_from(store))
    try:
        yield engine
    finally:
        engine.dispose()
