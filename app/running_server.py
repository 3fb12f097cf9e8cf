"""Where a running ``foldwise serve`` can be found: a small file in the config folder while it runs.

``foldwise serve`` writes ``server.json`` (its URL, process id and store) once its port is bound and
removes it when it stops; ``foldwise share`` reads it, so a link names the port the server really uses.
A file left by a server that was killed is recognised by its process id and ignored.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

STATE_NAME = "server.json"


@dataclass(frozen=True)
class RunningServer:
    url: str
    pid: int
    store: str


def announce(config_dir: Path, server: RunningServer) -> Path:
    """Record ``server`` as the running one (readable by its owner only)."""
    config_dir.mkdir(parents=True, exist_ok=True)
    path = config_dir / STATE_NAME
    temporary = path.with_suffix(".tmp")
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(descriptor, "w") as file:
        json.dump({"url": server.url, "pid": server.pid, "store": server.store}, file)
    os.replace(temporary, path)
    return path


def withdraw(config_dir: Path, pid: int) -> None:
    """Remove the record if it is still this process's (another server may have started since)."""
    found = _read(config_dir / STATE_NAME)
    if found is not None and found.pid == pid:
        (config_dir / STATE_NAME).unlink(missing_ok=True)


def find_running(config_dir: Path) -> RunningServer | None:
    """The server recorded in ``config_dir``, or None when none is recorded or its process has gone."""
    found = _read(config_dir / STATE_NAME)
    return found if found is not None and _alive(found.pid) else None


def _read(path: Path) -> RunningServer | None:
    try:
        data = json.loads(path.read_text())
        return RunningServer(url=str(data["url"]), pid=int(data["pid"]), store=str(data.get("store", "")))
    except (OSError, ValueError, KeyError, TypeError):
        return None  # missing, half-written or foreign: as good as no record


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # alive, someone else's
    return True
