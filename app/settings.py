"""The one settings object, built from the environment and command-line options, never at import time."""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path


@dataclass(frozen=True)
class Settings:
    db_url: str
    host: str = "127.0.0.1"
    port: int = 8000
    spool_dir: Path = Path.home() / ".local" / "state" / "foldwise" / "spool"

    @classmethod
    def from_env(cls, environ: Mapping[str, str] | None = None, **overrides) -> Settings:
        """``FOLDWISE_DB`` (path or SQLAlchemy URL), ``FOLDWISE_HOST``, ``FOLDWISE_PORT``, ``FOLDWISE_SPOOL``."""
        from foldwise.store import db_url_from, default_db_url

        environ = os.environ if environ is None else environ
        settings = cls(db_url=default_db_url(environ), host=environ.get("FOLDWISE_HOST", "127.0.0.1"),
                       port=int(environ.get("FOLDWISE_PORT", "8000")), spool_dir=spool_dir_from(environ))
        given = {key: value for key, value in overrides.items() if value is not None}
        if "db_url" in given:
            given["db_url"] = db_url_from(given["db_url"])
        return replace(settings, **given)


def spool_dir_from(environ: Mapping[str, str]) -> Path:
    if environ.get("FOLDWISE_SPOOL"):
        return Path(environ["FOLDWISE_SPOOL"])
    state = environ.get("XDG_STATE_HOME") or str(Path.home() / ".local" / "state")
    return Path(state) / "foldwise" / "spool"
