"""The one settings object, built from the environment and command-line options, never at import time."""

from __future__ import annotations

import ipaddress
import os
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path


@dataclass(frozen=True)
class Settings:
    db_url: str
    host: str = "127.0.0.1"
    port: int = 8000
    config_dir: Path | None = None  # None: $FOLDWISE_CONFIG or ~/.config/foldwise (holds keys.json)
    require_read_key: bool = False  # always on when bound to an address other than loopback
    max_body_bytes: int = 1 << 30
    live_stall_seconds: float = 60.0  # a running assessment silent this long is shown as stalled

    @classmethod
    def from_env(cls, environ: Mapping[str, str] | None = None, **overrides) -> Settings:
        """``FOLDWISE_DB`` (path or SQLAlchemy URL), ``FOLDWISE_HOST``, ``FOLDWISE_PORT``,
        ``FOLDWISE_CONFIG``, ``FOLDWISE_REQUIRE_READ_KEY`` (1 to require), ``FOLDWISE_MAX_BODY_MB``,
        ``FOLDWISE_LIVE_STALL_SECONDS``."""
        from foldwise.store import db_url_from, default_db_url

        environ = os.environ if environ is None else environ
        settings = cls(
            db_url=default_db_url(environ), host=environ.get("FOLDWISE_HOST", "127.0.0.1"),
            port=int(environ.get("FOLDWISE_PORT", "8000")),
            config_dir=config_dir_from(environ),
            require_read_key=environ.get("FOLDWISE_REQUIRE_READ_KEY", "") in ("1", "true", "yes"),
            max_body_bytes=int(float(environ.get("FOLDWISE_MAX_BODY_MB", "1024")) * (1 << 20)),
            live_stall_seconds=float(environ.get("FOLDWISE_LIVE_STALL_SECONDS", "60")))
        given = {key: value for key, value in overrides.items() if value is not None}
        if "db_url" in given:
            given["db_url"] = db_url_from(given["db_url"])
        return replace(settings, **given)

    @property
    def loopback(self) -> bool:
        return is_loopback(self.host)

    @property
    def reads_need_key(self) -> bool:
        return self.require_read_key or not self.loopback

    def keys_path(self) -> Path:
        return (self.config_dir or config_dir_from(os.environ)) / "keys.json"


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def spool_dir_from(environ: Mapping[str, str]) -> Path:
    if environ.get("FOLDWISE_SPOOL"):
        return Path(environ["FOLDWISE_SPOOL"])
    state = environ.get("XDG_STATE_HOME") or str(Path.home() / ".local" / "state")
    return Path(state) / "foldwise" / "spool"


def config_dir_from(environ: Mapping[str, str]) -> Path:
    if environ.get("FOLDWISE_CONFIG"):
        return Path(environ["FOLDWISE_CONFIG"])
    config = environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(config) / "foldwise"
