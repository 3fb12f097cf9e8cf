"""Reliability with real processes: concurrent writers, a server killed with SIGKILL, a client killed
mid-push, and online backups and checks while the server takes pushes.

Every server here is `foldwise serve` in its own process on loopback over a fresh SQLite file under
tmp_path; every client is a separate Python process using foldwise.client. The store is read back
with the standard library's sqlite3 (SQLite's own PRAGMA integrity_check and foreign_key_check) and
with load_payload, compared with the payload each client sent. Each test prints its figures.
"""

from __future__ import annotations

import json
import os
import random
import select
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path
from uuid import uuid4

import httpx
import numpy as np
import pytest

from foldwise.client import CREATED, SPOOLED, STORED, resend
from foldwise.keys import KeyFile
from foldwise.payload import AssessmentPayload, Prediction
from foldwise.store import load_payload, make_engine

pytestmark = pytest.mark.server

SEED = 20240611
KILL_ROUNDS = 20

# Pushes (or saves) every payload file in a folder, once all such processes are ready (the "go" file).
PUSHER = """
import json, sys, time
from pathlib import Path
from foldwise.client import push, save
from foldwise.payload import AssessmentPayload

folder, action, target, go = Path(sys.argv[1]), sys.argv[2], sys.argv[3], Path(sys.argv[4])
payloads = [AssessmentPayload.model_validate_json(p.read_text()) for p in sorted(folder.glob("*.json"))]
(folder / "ready").touch()
deadline = time.monotonic() + 120
while not go.exists() and time.monotonic() < deadline:
    time.sleep(0.01)
outcomes = []
for payload in payloads:
    if (folder / "stop").exists():
        break
    if action == "save":
        outcomes.append("created" if save(payload, target) else "already stored")
    else:
        outcomes.append(push(payload, target, retries=1, spool_dir=folder / "spool"))
print(json.dumps(outcomes), flush=True)
"""

# A client that stays up: each input line "<payload file> <url>" is pushed once; it says "pushing" just
# before push() and the outcome after it.
CLIENT = """
import sys
from pathlib import Path
from foldwise.client import push
from foldwise.payload import AssessmentPayload

for line in sys.stdin:
    path, url = line.split()
    payload = AssessmentPayload.model_validate_json(Path(path).read_text())
    print("pushing", flush=True)
    print(push(payload, url, retries=1, spool_dir=sys.argv[1]), flush=True)
"""


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class _Server:
    """`foldwise serve` over one store on one loopback port; started again on the same port after a kill."""

    def __init__(self, db_path: Path, folder: Path):
        self.db_path, self.config_dir, self.log_path = db_path, folder / "config", folder / "server.log"
        self.port = _free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.process: subprocess.Popen | None = None
        self.starts = 0

    def start(self, timeout: float = 60.0) -> None:
        with open(self.log_path, "a") as log:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "foldwise.cli", "serve", "--create", "--db", str(self.db_path),
                 "--port", str(self.port)],
                stdout=log, stderr=subprocess.STDOUT,
                env={**os.environ, "PYTHONWARNINGS": "ignore", "FOLDWISE_CONFIG": str(self.config_dir)})
        self.starts += 1
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"the server exited with {self.process.returncode}: {self.log()[-2000:]}")
            try:
                if httpx.get(self.url + "/healthz", timeout=1.0).status_code == 200:
                    self.write_key = KeyFile(self.config_dir / "keys.json").ensure_write_key().secret
                    return
            except httpx.TransportError:
                time.sleep(0.05)
        raise RuntimeError(f"the server did not answer on {self.url} within {timeout} s")

    def kill(self) -> None:
        os.kill(self.process.pid, signal.SIGKILL)
        self.process.wait(timeout=10)

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(timeout=10)

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")


class _Child:
    """A Python process running ``script``, spoken to line by line over its stdin and stdout."""

    def __init__(self, script: str, *args, env: dict, log: Path):
        with open(log, "a") as errors:
            self.process = subprocess.Popen([sys.executable, "-c", script, *map(str, args)], env=env,
                                            bufsize=0, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                            stderr=errors)
        self._buffer = b""

    def send(self, line: str) -> None:
        self.process.stdin.write(line.encode() + b"\n")

    def line(self, timeout: float) -> str | None:
        """The next line of output, or None when none came within ``timeout`` seconds."""
        deadline = time.monotonic() + timeout
        while b"\n" not in self._buffer:
            remaining = deadline - time.monotonic()
            if remaining <= 0 or not select.select([self.process.stdout], [], [], remaining)[0]:
                return None
            chunk = os.read(self.process.stdout.fileno(), 65536)
            if not chunk:
                raise EOFError(f"the child process ended (exit code {self.process.poll()})")
            self._buffer += chunk
        line, self._buffer = self._buffer.split(b"\n", 1)
        return line.decode()

    def kill(self) -> None:
        os.kill(self.process.pid, signal.SIGKILL)
        self.process.wait(timeout=10)

    def stop(self) -> None:
        if self.process.poll() is None:
            self.kill()
        self.process.stdin.close()
        self.process.stdout.close()


@pytest.fixture
def started():
    """Every server and child process a test starts; whatever still runs is ended at teardown."""
    processes: list[_Server | _Child] = []
    yield processes
    for process in processes:
        process.stop()


def _copies(base: AssessmentPayload, label: str, count: int, **update) -> list[AssessmentPayload]:
    return [base.model_copy(update={"uuid": uuid4(), "name": f"{label} {i}", **update}) for i in range(count)]


def _inflated(base: AssessmentPayload, *, copies: int) -> list[Prediction]:
    """The real outer-test predictions with their columns repeated, as large as the real ones followed by
    ``copies`` more of each twice as wide: a large payload whose rows still fit the folds, and still one
    block per fold and configuration."""
    return [Prediction.from_array(np.tile(p.array(), (1, 1 + 2 * copies)), repeat=p.repeat, outer_fold=p.outer_fold,
                                  config=p.config, kind=p.kind) for p in base.predictions]


def _write(payloads: list[AssessmentPayload], folder: Path) -> list[Path]:
    folder.mkdir(parents=True)
    paths = [folder / f"{i:03d}.json" for i in range(len(payloads))]
    for path, payload in zip(paths, payloads, strict=True):
        path.write_text(payload.model_dump_json(), encoding="utf-8")
    return paths


def _env(server: _Server) -> dict:
    return {**os.environ, "FOLDWISE_KEY": server.write_key}


def _integrity(db: Path) -> tuple[str, int]:
    """SQLite's PRAGMA integrity_check, and the number of rows foreign_key_check finds without an owner."""
    connection = sqlite3.connect(db)
    try:
        rows = [row[0] for row in connection.execute("PRAGMA integrity_check")]
        orphans = len(connection.execute("PRAGMA foreign_key_check").fetchall())
    finally:
        connection.close()
    return "; ".join(rows), orphans


_CHILD_COUNTS = {  # child table -> the number of its rows an assessment payload implies
    "families": lambda p: len(p.families),
    "configurations": lambda p: len(p.configurations),
    "outer_folds": lambda p: len(p.outer_folds),
    "inner_scores": lambda p: len(p.inner_scores),
    "outer_scores": lambda p: len(p.outer_scores),
    "fold_choices": lambda p: len(p.family_winners) + len(p.overall_winners),
    "predictions": lambda p: len(p.predictions),
    "failures": lambda p: len(p.failures),
    "fitted_models": lambda p: len(p.models),
}


def _stored(db: Path) -> dict[str, dict[str, int]]:
    """Per stored uuid: how many assessment rows carry it and how many rows each child table holds for it."""
    counts = ", ".join(f"(SELECT count(*) FROM {table} t WHERE t.assessment_id = a.id)"
                       for table in _CHILD_COUNTS)
    connection = sqlite3.connect(db)
    try:
        rows = connection.execute(f"SELECT a.uuid, {counts} FROM assessments a").fetchall()
    finally:
        connection.close()
    found: dict[str, dict[str, int]] = {}
    for uuid, *children in rows:
        entry = found.setdefault(uuid, {"rows": 0})
        entry["rows"] += 1
        entry.update(zip(_CHILD_COUNTS, children, strict=True))
    return found


def _partial(stored: dict[str, dict[str, int]], expected: dict[str, AssessmentPayload]) -> list[str]:
    """Stored uuids whose child rows differ in number from what their payload carries (or are unknown)."""
    return [uuid for uuid, counts in stored.items()
            if uuid not in expected
            or any(counts[table] != count(expected[uuid]) for table, count in _CHILD_COUNTS.items())]


def _differences(db: Path, payloads: list[AssessmentPayload]) -> int:
    engine = make_engine(f"sqlite:///{db}")
    try:
        return sum(load_payload(engine, str(payload.uuid)) != payload for payload in payloads)
    finally:
        engine.dispose()


def _wal_mtime(db: Path) -> int | None:
    try:
        return os.stat(f"{db}-wal").st_mtime_ns
    except FileNotFoundError:
        return None


def test_pushes_from_eight_processes_and_a_direct_save_all_land_once_and_whole(
        tmp_path, small_assessment, started):
    n_pushers, n_pushes, n_saves = 8, 25, 10
    server = _Server(tmp_path / "store.db", tmp_path)
    started.append(server)
    server.start()
    base = small_assessment.payload
    folders = [tmp_path / f"pusher{k}" for k in range(n_pushers)] + [tmp_path / "saver"]
    groups = [_copies(base, f"concurrency pusher {k}, push", n_pushes) for k in range(n_pushers)]
    groups.append(_copies(base, "concurrency direct save", n_saves))
    for folder, group in zip(folders, groups, strict=True):
        _write(group, folder)
    go = tmp_path / "go"
    log = tmp_path / "children.log"
    children = [_Child(PUSHER, folder, "push", server.url, go, env=_env(server), log=log)
                for folder in folders[:-1]]
    children.append(_Child(PUSHER, folders[-1], "save", server.db_path, go, env=_env(server), log=log))
    started.extend(children)
    deadline = time.monotonic() + 120
    while not all((folder / "ready").exists() for folder in folders) and time.monotonic() < deadline:
        time.sleep(0.05)
    began = time.perf_counter()
    go.touch()
    outcomes = [json.loads(child.line(timeout=max(1.0, deadline + 60 - time.monotonic())) or "null")
                for child in children]
    elapsed = time.perf_counter() - began

    assert outcomes == [[CREATED] * n_pushes] * n_pushers + [[CREATED] * n_saves], (
        (tmp_path / "children.log").read_text()[-3000:])
    assert "database is locked" not in server.log()
    payloads = [payload for group in groups for payload in group]
    stored = _stored(server.db_path)
    duplicates = sum(entry["rows"] - 1 for entry in stored.values())
    differences = _differences(server.db_path, payloads)
    print(f"\nconcurrency: {n_pushers} processes × {n_pushes} pushes + 1 process × {n_saves} direct saves "
          f"= {len(stored)} stored, {duplicates} duplicates, {differences} differences, {elapsed:.1f} s")
    assert set(stored) == {str(payload.uuid) for payload in payloads}
    assert duplicates == 0 and differences == 0
    assert _partial(stored, {str(p.uuid): p for p in payloads}) == []


def test_sigkill_during_large_pushes_leaves_a_sound_store_and_resend_completes(
        tmp_path, small_assessment, started):
    rng = random.Random(SEED)
    began = time.perf_counter()
    base = small_assessment.payload
    predictions = _inflated(base, copies=80)
    warmup = _copies(base, "sigkill warm-up", 1)
    payloads = warmup + _copies(base, "sigkill round", KILL_ROUNDS + 1, predictions=predictions)
    expected = {str(payload.uuid): payload for payload in payloads}
    files = _write(payloads, tmp_path / "payloads")
    size_mb = files[1].stat().st_size / 1e6
    server = _Server(tmp_path / "store.db", tmp_path)
    started.append(server)
    server.start()
    spool = tmp_path / "spool"
    client = _Child(CLIENT, spool, env=_env(server), log=tmp_path / "client.log")
    started.append(client)

    for path in files[:2]:  # a small warm-up push, then one large push to time
        client.send(f"{path} {server.url}")
        assert client.line(timeout=60) == "pushing", (tmp_path / "client.log").read_text()
        pushed = time.perf_counter()
        assert client.line(timeout=60) == CREATED
        duration = time.perf_counter() - pushed

    kinds = {"before the write": 0, "mid-write": 0, "after the commit": 0, "response lost": 0}
    integrity_ok = partial = resent = 0
    for round_ in range(KILL_ROUNDS):
        path, payload = files[round_ + 2], payloads[round_ + 2]
        before = _wal_mtime(server.db_path)
        client.send(f"{path} {server.url}")
        assert client.line(timeout=60) == "pushing"
        if round_ % 2 == 0:  # anywhere in the push
            time.sleep(rng.uniform(0.0, duration))
        else:  # in the write: once the transaction has spilled into the WAL, 0-20 ms later
            extra, deadline = rng.uniform(0.0, 0.02), time.monotonic() + 30
            while _wal_mtime(server.db_path) == before and time.monotonic() < deadline:
                time.sleep(0.001)
            time.sleep(extra)
        server.kill()
        wal_written = _wal_mtime(server.db_path) != before
        outcome = client.line(timeout=60)
        assert outcome in (CREATED, SPOOLED)

        integrity, orphans = _integrity(server.db_path)
        integrity_ok += integrity == "ok" and orphans == 0
        stored = _stored(server.db_path)
        partial += len(_partial(stored, expected))
        landed = str(payload.uuid) in stored
        if not landed:
            kinds["mid-write" if wal_written else "before the write"] += 1
        else:
            kinds["after the commit"] += 1
            kinds["response lost"] += outcome == SPOOLED
        assert outcome == SPOOLED or landed

        server.start()
        if outcome == SPOOLED:
            assert resend(spool_dir=spool, token=server.write_key, backoff=0.1) == [
                (f"{payload.uuid}.json", STORED if landed else CREATED)]
            resent += 1
        assert list(spool.glob("*")) == []
    server.stop()
    client.stop()

    stored = _stored(server.db_path)
    differences = _differences(server.db_path, payloads)
    print(f"\nsigkill: {KILL_ROUNDS} rounds (seed {SEED}) of {size_mb:.1f} MB pushes lasting "
          f"{duration:.2f} s, killed at random in the push (even rounds) or in the write (odd rounds); "
          f"kills landed {kinds['before the write']} before the write, {kinds['mid-write']} mid-write "
          f"(WAL written, transaction not committed), "
          f"{kinds['after the commit']} after the commit ({kinds['response lost']} before the response); "
          f"integrity ok {integrity_ok}/{KILL_ROUNDS}; partial assessments {partial}; {resent} spooled "
          f"pushes resent, each completed; {len(stored)} stored once each, {differences} differences, "
          f"{server.starts} server starts, {time.perf_counter() - began:.1f} s")
    assert integrity_ok == KILL_ROUNDS and partial == 0
    assert set(stored) == set(expected) and all(entry["rows"] == 1 for entry in stored.values())
    assert differences == 0


def _holds(spooled: Path, payload: AssessmentPayload) -> bool:
    """Whether a spool file is complete JSON carrying the whole payload."""
    try:
        return AssessmentPayload.model_validate(json.loads(spooled.read_text())["payload"]) == payload
    except (ValueError, KeyError):  # cut-off JSON, or a payload that does not validate
        return False


def _watch(db: Path, payload: AssessmentPayload, *, seconds: float = 2.0) -> list[str]:
    """What the store holds of ``payload``, looked at every 0.1 s for ``seconds`` (less once it is whole)."""
    uuid, seen = str(payload.uuid), []
    for _ in range(round(seconds / 0.1)):
        entry = _stored(db).get(uuid)
        partial = entry is not None and _partial({uuid: entry}, {uuid: payload})
        seen.append("absent" if entry is None else "partial" if partial else "whole")
        if seen[-2:] == ["whole", "whole"]:
            break
        time.sleep(0.1)
    return seen


def test_a_client_killed_mid_push_leaves_nothing_half_pushed(tmp_path, small_assessment, started):
    rng = random.Random(SEED + 1)
    # Rounds 0, 2, 4, 6 push to the server, the others spool for an unreachable one; the kill comes at a
    # random moment of the push, except in rounds 3 and 7: 0-5 ms after the spool file was opened.
    rounds = 8
    base = small_assessment.payload
    payloads = _copies(base, "client killed", rounds + 2, predictions=_inflated(base, copies=80))
    warmups = _copies(base, "client warm-up", rounds)
    expected = {str(payload.uuid): payload for payload in payloads + warmups}
    files = _write(payloads, tmp_path / "payloads")
    warmup_files = _write(warmups, tmp_path / "warmups")
    server = _Server(tmp_path / "store.db", tmp_path)
    started.append(server)
    server.start()
    dead = f"http://127.0.0.1:{_free_port()}"  # nothing listens there
    spools = [tmp_path / f"spool{k}" for k in range(rounds + 1)]
    clients = [_Child(CLIENT, spool, env=_env(server), log=tmp_path / "clients.log") for spool in spools]
    started.extend(clients)

    timings = {}  # clients[0] times both paths, unhurt; the others are killed
    for path, url, outcome in ((files[0], server.url, CREATED), (files[1], dead, SPOOLED)):
        clients[0].send(f"{path} {url}")
        assert clients[0].line(timeout=90) == "pushing", (tmp_path / "clients.log").read_text()
        pushed = time.perf_counter()
        assert clients[0].line(timeout=60) == outcome
        timings[url] = time.perf_counter() - pushed
    assert resend(spool_dir=spools[0], url=server.url, token=server.write_key) == [
        (f"{payloads[1].uuid}.json", CREATED)]
    for client, path in zip(clients[1:], warmup_files, strict=True):  # so that each is as warm as clients[0]
        client.send(f"{path} {server.url}")
        assert client.line(timeout=90) == "pushing" and client.line(timeout=60) == CREATED

    found = {"store whole": 0, "store absent": 0, "spool complete": 0, "spool absent": 0, "leftover .part": 0}
    half_pushed = 0
    for k in range(rounds):
        client, spool, payload = clients[k + 1], spools[k + 1], payloads[k + 2]
        url = server.url if k % 2 == 0 else dead
        client.send(f"{files[k + 2]} {url}")
        assert client.line(timeout=90) == "pushing", (tmp_path / "clients.log").read_text()
        if k % 4 == 3:
            extra, deadline = rng.uniform(0.0, 0.005), time.monotonic() + 30
            while not any(spool.glob("*")) and time.monotonic() < deadline:
                time.sleep(0.001)
            time.sleep(extra)
        else:
            time.sleep(rng.uniform(0.0, timings[url]))
        client.kill()

        found["leftover .part"] += len(list(spool.glob("*.part")))  # never read: resend takes *.json only
        spooled = list(spool.glob("*.json"))
        assert spooled in ([], [spool / f"{payload.uuid}.json"])
        complete = all(_holds(entry, payload) for entry in spooled)
        half_pushed += not complete
        found["spool complete" if spooled else "spool absent"] += complete
        if url == server.url:  # a body the server got whole is stored whole; watched until it settles
            seen = _watch(server.db_path, payload)
            half_pushed += "partial" in seen
            if "whole" in seen:
                assert "absent" not in seen[seen.index("whole"):]  # once there, it stays
            found["store whole" if seen[-1] == "whole" else "store absent"] += 1
        if spooled and complete:
            assert resend(spool_dir=spool, url=server.url, token=server.write_key)[0][1] in (CREATED, STORED)

    integrity, orphans = _integrity(server.db_path)
    stored = _stored(server.db_path)
    half_pushed += len(_partial(stored, expected))
    differences = _differences(server.db_path, [expected[uuid] for uuid in stored])
    size_mb = files[2].stat().st_size / 1e6
    print(f"\nclient killed: {rounds} SIGKILLs (seed {SEED + 1}) of clients pushing {size_mb:.1f} MB "
          f"(a push took {timings[server.url]:.2f} s to the server, {timings[dead]:.2f} s to the spool): "
          + ", ".join(f"{name} {count}" for name, count in found.items())
          + f"; integrity {integrity}, {orphans} orphan rows, {len(stored)} stored (counting "
            f"{rounds} small warm-ups), {half_pushed} half-pushed, {differences} differences")
    assert integrity == "ok" and orphans == 0 and half_pushed == 0
    assert differences == 0 and all(entry["rows"] == 1 for entry in stored.values())


def _cli(*args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "foldwise.cli", *args], capture_output=True, text=True,
                          timeout=timeout, env={**os.environ, "PYTHONWARNINGS": "ignore"})


def test_backup_and_check_while_the_server_takes_pushes(tmp_path, small_assessment, started):
    base = small_assessment.payload
    # Enough that pushes still go on after both backups (the pusher stops at "stop"; most are never sent).
    payloads = _copies(base, "backup", 200, predictions=_inflated(base, copies=12))
    folder = tmp_path / "pusher"
    _write(payloads, folder)
    server = _Server(tmp_path / "store.db", tmp_path)
    started.append(server)
    server.start()
    go = tmp_path / "go"
    go.touch()
    pusher = _Child(PUSHER, folder, "push", server.url, go, env=_env(server), log=tmp_path / "pusher.log")
    started.append(pusher)
    deadline = time.monotonic() + 90
    while len(_stored(server.db_path)) < 2 and time.monotonic() < deadline:
        time.sleep(0.05)

    copies, during = [tmp_path / "backups" / f"copy{i}.db" for i in range(2)], []
    for copy in copies:
        stored_before = len(_stored(server.db_path))
        done = _cli("backup", str(copy), "--db", str(server.db_path))
        assert done.returncode == 0 and f"backed up to {copy}" in done.stdout, done.stderr
        during.append((stored_before, len(_stored(server.db_path))))
    still_pushing = pusher.process.poll() is None
    (folder / "stop").touch()
    outcomes = json.loads(pusher.line(timeout=120) or "null")
    assert outcomes == [CREATED] * len(outcomes) and still_pushing

    expected = {str(payload.uuid): payload for payload in payloads}
    held = []
    for copy in copies:
        integrity, orphans = _integrity(copy)
        stored = _stored(copy)
        assert integrity == "ok" and orphans == 0 and _partial(stored, expected) == []
        assert _differences(copy, [expected[uuid] for uuid in stored]) == 0
        held.append(len(stored))

    checked = _cli("check", "--db", str(server.db_path))
    assert checked.returncode == 0, checked.stderr
    lines = checked.stdout.splitlines()
    reported = {name: int(count.replace(",", "")) for name, count in (line.split() for line in lines[1:])}
    connection = sqlite3.connect(server.db_path)
    try:
        tables = [name for (name,) in connection.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' "
            "AND name != 'alembic_version'")]
        counted = {name: connection.execute(f"SELECT count(*) FROM {name}").fetchone()[0] for name in tables}
    finally:
        connection.close()
    print(f"\nbackup: {len(outcomes)} pushes of {(folder / '000.json').stat().st_size / 1e6:.1f} MB went on; "
          + "; ".join(f"copy {i + 1} holds {n} complete assessments (the store had {a} → {b} around it), "
                      f"integrity ok" for i, (n, (a, b)) in enumerate(zip(held, during, strict=True)))
          + f"\ncheck: {lines[0]}; " + ", ".join(f"{name} {count}" for name, count in reported.items())
          + f" — equal to sqlite3's counts: {reported == counted}")
    assert lines[0] == "integrity: ok"
    assert reported == counted and reported["assessments"] == len(outcomes)
