"""Getting an assessment into a store: ``push`` over HTTP (retry, then spool), ``save`` directly, ``resend``.

Nothing is lost: a payload the server cannot take right now is written to a spool folder, and
``resend`` (or ``foldwise resend``) delivers it later.
"""

from __future__ import annotations

import json
import os
import time
import warnings
from pathlib import Path

import httpx

from foldwise.keys import KeyFile
from foldwise.payload import AssessmentPayload
from foldwise.settings import config_dir_from, spool_dir_from
from foldwise.wire import CONTENT_TYPE, packed_body

CREATED, STORED, SPOOLED = "created", "already stored", "spooled"
_PIECE = 1 << 20  # bytes per write of a push's body


class PushRejected(Exception):
    """The server refused the payload itself (4xx): sending it again would not help."""

    def __init__(self, status: int, detail):
        super().__init__(f"the server refused the assessment ({status}): {detail}")
        self.status, self.detail = status, detail


class ServerFailed(Exception):
    """The server was reached but failed on the push (5xx) every time it was tried: worth trying later."""

    def __init__(self, status: int, detail):
        super().__init__(f"the server failed on the assessment ({status}): {detail}")
        self.status, self.detail = status, detail


def save(payload: AssessmentPayload, target: str) -> bool:
    """Write into the store at ``target`` (a path or SQLAlchemy URL); True when newly stored, False when the
    same assessment (uuid and content) is already there.

    Refused as a push would be: ``ValueError`` (a ``pydantic.ValidationError``) when the payload, changed
    since it was built, no longer agrees with itself (``foldwise.consistency``); ``UuidConflict`` when
    the store holds other content under its uuid.
    """
    from foldwise.store import db_url_from, insert_assessment, make_engine

    payload.recheck()
    engine = make_engine(db_url_from(target))
    try:
        return insert_assessment(engine, payload)
    finally:
        engine.dispose()


def push(payload: AssessmentPayload, url: str, *, token: str | None = None, retries: int = 3,
         backoff: float = 0.5, timeout: float = 60.0, spool_dir: str | Path | None = None) -> str:
    """POST the assessment to a foldwise server at ``url`` with a write key (``token``, else ``$FOLDWISE_KEY``,
    else the key file of this machine).

    Returns ``"created"``, ``"already stored"`` or ``"spooled"`` (with a warning naming the spool file and
    why) when the server could not be reached, or answered a server error (5xx), on all ``retries``
    attempts. A refusal (4xx) raises ``PushRejected`` naming why, and is not spooled: the same payload
    would be refused again.
    """
    try:
        return _send(packed_body(payload), url, content_type=CONTENT_TYPE, token=token, retries=retries,
                     backoff=backoff, timeout=timeout)
    except (httpx.TransportError, ServerFailed) as error:
        path = _spool(payload.packed_json(), url, payload.uuid, spool_dir)  # JSON: a file to read and resend
        reason = f"could not reach {url} ({error})" if isinstance(error, httpx.TransportError) else str(error)
        warnings.warn(f"{reason}; kept in {path}, deliver it with `foldwise resend`", RuntimeWarning,
                      stacklevel=2)
        return SPOOLED


def resend(*, spool_dir: str | Path | None = None, url: str | None = None, token: str | None = None,
           retries: int = 3, backoff: float = 0.5) -> list[tuple[str, str]]:
    """Deliver every spooled assessment (to ``url``, or to where each was first sent).

    Returns (file name, outcome) pairs; a delivered file is removed, an undeliverable one stays, its
    outcome saying why: still unreachable, a server error, or the server's refusal.
    """
    outcomes = []
    for path in sorted(_spool_dir(spool_dir).glob("*.json")):
        entry = json.loads(path.read_text(encoding="utf-8"))
        try:
            outcome = _send([json.dumps(entry["payload"]).encode()], url or entry["url"], token=token, retries=retries,
                            backoff=backoff, timeout=60.0)
        except httpx.TransportError as error:
            outcomes.append((path.name, f"still unreachable: {error}"))
            continue
        except (ServerFailed, PushRejected) as error:
            outcomes.append((path.name, str(error)))
            continue
        path.unlink()
        outcomes.append((path.name, outcome))
    return outcomes


def _send(parts: list[bytes], url: str, *, content_type: str = "application/json", token, retries, backoff,
          timeout) -> str:
    """POST the body made of ``parts``; the outcome, else the last transport error or ``ServerFailed`` once
    retries ran out, or ``PushRejected`` at once."""
    headers = {"content-type": content_type, "content-length": str(sum(map(len, parts)))}
    token = token or write_key()
    if token:
        headers["authorization"] = f"Bearer {token}"
    endpoint = url.rstrip("/") + "/api/assessments"
    for attempt in range(retries):
        try:
            response = httpx.post(endpoint, content=_pieces(parts), headers=headers, timeout=timeout)
        except httpx.TransportError:
            if attempt == retries - 1:
                raise
            time.sleep(backoff * 2 ** attempt)
            continue
        if response.status_code in (200, 201):
            return CREATED if response.status_code == 201 else STORED
        if response.status_code >= 500 and attempt < retries - 1:
            time.sleep(backoff * 2 ** attempt)
            continue
        if response.status_code >= 500:
            raise ServerFailed(response.status_code, _detail(response))
        raise PushRejected(response.status_code, _detail(response))
    raise ValueError(f"retries must be at least 1, got {retries}")


def _pieces(parts: list[bytes]):
    """The body in pieces of about ``_PIECE`` bytes: handed one large body, httpx copies what each socket
    send leaves over, which for a payload of hundreds of MB takes longer than the server's whole work;
    handed 30,000 small blocks, it pays its own cost per piece 30,000 times."""
    held: list[bytes] = []
    size = 0
    for part in parts:
        if len(part) >= _PIECE:
            if held:
                yield b"".join(held)
                held, size = [], 0
            view = memoryview(part)
            for start in range(0, len(part), _PIECE):
                yield view[start:start + _PIECE].tobytes()
            continue
        held.append(part)
        size += len(part)
        if size >= _PIECE:
            yield b"".join(held)
            held, size = [], 0
    if held:
        yield b"".join(held)


def write_key() -> str | None:
    """$FOLDWISE_KEY, else the write key in this machine's key file (a server on this machine made it)."""
    if os.environ.get("FOLDWISE_KEY"):
        return os.environ["FOLDWISE_KEY"]
    keys = KeyFile(config_dir_from(os.environ) / "keys.json").active("write")
    return keys[0].secret if keys else None


def _detail(response: httpx.Response):
    try:
        return response.json().get("detail", response.text)
    except ValueError:
        return response.text


def _spool_dir(spool_dir) -> Path:
    return Path(spool_dir) if spool_dir is not None else spool_dir_from(os.environ)


def _spool(body: bytes, url: str, uuid, spool_dir) -> Path:
    folder = _spool_dir(spool_dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{uuid}.json"
    partial = path.with_suffix(".part")
    partial.write_text(json.dumps({"url": url, "payload": json.loads(body)}), encoding="utf-8")
    os.replace(partial, path)  # a reader never sees half a file
    return path
