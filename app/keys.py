"""Access keys: a write key for anything that changes the store, read keys for visitors.

Keys live in one JSON file readable only by its owner (mode 0600) in the config folder. The server
re-reads the file whenever it changes on disk, so a key revoked from the command line stops working
at the next request.
"""

from __future__ import annotations

import json
import os
import secrets
import tempfile
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Literal

Kind = Literal["write", "read"]
_PREFIX = {"write": "fw_w_", "read": "fw_r_"}


@dataclass(frozen=True)
class AccessKey:
    id: str
    kind: Kind
    secret: str
    label: str
    created_at: str
    revoked_at: str | None = None

    @property
    def active(self) -> bool:
        return self.revoked_at is None


class KeyFile:
    """The keys of one server, kept in ``<config dir>/keys.json``."""

    def __init__(self, path: Path):
        self.path = Path(path)
        self._cache: tuple[int, int, list[AccessKey]] | None = None

    def all(self) -> list[AccessKey]:
        try:
            stat = self.path.stat()
        except FileNotFoundError:
            return []
        if self._cache is None or self._cache[:2] != (stat.st_mtime_ns, stat.st_size):
            entries = json.loads(self.path.read_text(encoding="utf-8")).get("keys", [])
            self._cache = (stat.st_mtime_ns, stat.st_size, [AccessKey(**entry) for entry in entries])
        return self._cache[2]

    def find(self, secret: str | None) -> AccessKey | None:
        """The active key with this secret, compared in constant time; None when there is none."""
        if not secret:
            return None
        for key in self.all():
            if key.active and secrets.compare_digest(key.secret, secret):
                return key
        return None

    def active(self, kind: Kind) -> list[AccessKey]:
        return [key for key in self.all() if key.active and key.kind == kind]

    def create(self, kind: Kind, label: str = "") -> AccessKey:
        if kind not in _PREFIX:
            raise ValueError(f"a key is 'write' or 'read', got {kind!r}")
        key = AccessKey(id=secrets.token_hex(4), kind=kind, secret=_PREFIX[kind] + secrets.token_urlsafe(24),
                        label=label, created_at=_now())
        self._write([*self.all(), key])
        return key

    def revoke(self, key_id: str) -> AccessKey:
        keys = self.all()
        matches = [key for key in keys if key.id == key_id and key.active]
        if not matches:
            known = ", ".join(key.id for key in keys if key.active) or "none"
            raise KeyError(f"no active key with id {key_id!r}; active ids: {known}")
        revoked = AccessKey(**{**asdict(matches[0]), "revoked_at": _now()})
        self._write([revoked if key.id == key_id else key for key in keys])
        return revoked

    def ensure_write_key(self) -> AccessKey:
        """The first active write key, created at the first start."""
        existing = self.active("write")
        return existing[0] if existing else self.create("write", label="created at first start")

    def _write(self, keys: list[AccessKey]) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
        text = json.dumps({"keys": [asdict(key) for key in keys]}, indent=2)
        handle, temporary = tempfile.mkstemp(dir=self.path.parent, prefix=".keys-")
        try:
            os.fchmod(handle, 0o600)
            with os.fdopen(handle, "w", encoding="utf-8") as out:
                out.write(text)
            os.replace(temporary, self.path)  # readers see the old file or the new one, never half
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        self._cache = None


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")
