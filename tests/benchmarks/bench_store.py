"""The store and the pages at scale: ingest over HTTP, page times and server memory, and their growth.

The assessment is invented (``synthetic.py``: seeded numpy draws, nothing fitted): 10 repeats × 10 outer
× 10 inner folds × 300 configurations × 2 metrics, 600,000 inner score rows, with float64 outer-test
predictions of every configuration for 5,000 samples. It is also built at 1/10 (30 configurations) and
1/100 (30 configurations, 1 repeat) of that size, to show how the times grow with the score rows.

- ingest: ``foldwise.client.push`` to a real ``foldwise serve`` on a free loopback port, serialising
  included, against a plain ``sqlite3`` ``executemany`` of the same score and prediction rows into
  equivalent tables (same columns and keys) in one transaction, the rows prepared beforehand; both
  timed in ``ROUNDS`` interleaved rounds, each on a fresh store, the fastest round of each counting
  (the disk is shared: one round of the baseline alone has ranged from 3.9 to 5.9 s here);
- pages: a fresh server on the stored assessment; the first request of each page, timed around the
  HTTP request on loopback (the server's code paths warmed on a small assessment first, so the figure
  is the page's own work, with nothing of this assessment cached); the server's peak resident memory
  (VmHWM) after them.
"""

from __future__ import annotations

import math
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import httpx
from _common import LiveServer, Targets, peak_rss_mb
from synthetic import FULL, HUNDREDTH, TENTH, Size, synthetic_payload

from foldwise.client import CREATED, push
from foldwise.payload import AssessmentPayload

PAGE_LIMIT_S, MEMORY_LIMIT_MB, INGEST_LIMIT = 0.5, 600, 2.5
ROUNDS = 3  # of the ingest and of its baseline, interleaved
GROWTH_SLACK = 1.2  # timing noise allowed on top of linear growth
# The score and prediction tables as foldwise's first migration made them: same columns, keys and index.
_BASELINE_SCHEMA = """
CREATE TABLE inner_scores (assessment_id INTEGER NOT NULL, position INTEGER NOT NULL,
    repeat INTEGER NOT NULL, outer_fold INTEGER NOT NULL, inner_fold INTEGER NOT NULL,
    config INTEGER NOT NULL, metric INTEGER NOT NULL, score FLOAT, fit_time FLOAT, score_time FLOAT,
    PRIMARY KEY (assessment_id, position));
CREATE INDEX ix_inner ON inner_scores (assessment_id, repeat, outer_fold);
CREATE TABLE outer_scores (assessment_id INTEGER NOT NULL, position INTEGER NOT NULL,
    repeat INTEGER NOT NULL, outer_fold INTEGER NOT NULL, config INTEGER NOT NULL, metric INTEGER NOT NULL,
    score FLOAT, fit_time FLOAT, score_time FLOAT, PRIMARY KEY (assessment_id, position));
CREATE INDEX ix_outer ON outer_scores (assessment_id, repeat, outer_fold);
CREATE TABLE predictions (assessment_id INTEGER NOT NULL, position INTEGER NOT NULL,
    repeat INTEGER NOT NULL, outer_fold INTEGER NOT NULL, config INTEGER NOT NULL, kind VARCHAR(10) NOT NULL,
    n_columns INTEGER NOT NULL, data BLOB NOT NULL, PRIMARY KEY (assessment_id, position));
"""


def plain_sqlite_s(payload: AssessmentPayload, path: Path) -> float:
    """Seconds for sqlite3's executemany of the payload's score and prediction rows, one transaction."""
    inner, outer = payload.inner_scores, payload.outer_scores
    rows = {
        "inner_scores": list(zip([1] * len(inner), range(len(inner)), inner.repeat, inner.outer_fold,
                                 inner.inner_fold, inner.config, inner.metric, inner.score, inner.fit_time,
                                 inner.score_time, strict=True)),
        "outer_scores": list(zip([1] * len(outer), range(len(outer)), outer.repeat, outer.outer_fold,
                                 outer.config, outer.metric, outer.score, outer.fit_time, outer.score_time,
                                 strict=True)),
        "predictions": [(1, i, p.repeat, p.outer_fold, p.config, p.kind, p.n_columns,
                         p.data) for i, p in enumerate(payload.predictions)],
    }
    connection = sqlite3.connect(path)
    connection.executescript(_BASELINE_SCHEMA)
    started = time.perf_counter()
    with connection:
        for table, values in rows.items():
            connection.executemany(f"INSERT INTO {table} VALUES ({', '.join('?' * len(values[0]))})", values)
    elapsed = time.perf_counter() - started
    connection.close()
    return elapsed


def ingest_s(payload: AssessmentPayload, warmup: AssessmentPayload, store: Path, log: Path) -> tuple[float, float]:
    """Seconds to push ``payload`` to a fresh server on ``store``, and that server's peak memory in MB."""
    server = LiveServer(store, log)
    try:
        push(warmup, server.url, token=server.write_key)  # the first push pays for imports, not this one
        started = time.perf_counter()
        outcome = push(payload, server.url, token=server.write_key, timeout=600)
        elapsed = time.perf_counter() - started
        peak = peak_rss_mb(server.process.pid)
    finally:
        server.stop()
    if outcome != CREATED:
        raise RuntimeError(f"the push answered {outcome!r}, not {CREATED!r}")
    return elapsed, peak


def page_times(server: LiveServer, uuid: str, members: list[str]) -> dict[str, float]:
    """Seconds for the first request of each page, timed around the request on loopback."""
    requests = {
        "assessment page": ("GET", f"/assessments/{uuid}", None),
        "paired comparison": ("GET", f"/assessments/{uuid}/compare", None),
        "ensemble preview of 5": ("POST", f"/api/assessments/{uuid}/ensembles/preview", {"members": members}),
    }
    times = {}
    headers = {"authorization": f"Bearer {server.write_key}"}
    with httpx.Client(base_url=server.url, headers=headers, timeout=300) as client:
        for name, (method, path, body) in requests.items():
            started = time.perf_counter()
            response = client.request(method, path, json=body)
            times[name] = time.perf_counter() - started
            if response.status_code != 200:
                raise RuntimeError(f"{name}: {method} {path} answered {response.status_code}: "
                                   f"{response.text[:500]}")
    return times


def measure(size: Size, folder: Path, warmup: AssessmentPayload) -> dict[str, float]:
    started = time.perf_counter()
    payload = synthetic_payload(size, seed=1)
    print(f"{size}: {size.n_inner_rows:,} inner and {size.n_outer_rows:,} outer score rows, "
          f"{len(payload.predictions):,} prediction blocks (built in {time.perf_counter() - started:.1f} s)",
          flush=True)
    folder.mkdir()
    figures = {"rows": size.n_inner_rows, "plain sqlite3": math.inf, "ingest": math.inf,
               "ingest server peak": 0.0}
    for round_ in range(ROUNDS):  # interleaved, each way's fastest round counts (the disk is shared and noisy)
        plain = plain_sqlite_s(payload, folder / f"plain{round_}.db")
        store = folder / ("store.db" if round_ == 0 else f"again{round_}.db")
        ingest, peak = ingest_s(payload, warmup, store, folder / f"ingest{round_}.log")
        print(f"  round {round_ + 1}: plain sqlite3 {plain:.2f} s, ingest {ingest:.2f} s", flush=True)
        figures["plain sqlite3"] = min(figures["plain sqlite3"], plain)
        figures["ingest"] = min(figures["ingest"], ingest)
        figures["ingest server peak"] = max(figures["ingest server peak"], peak)
        for spent in (folder / f"plain{round_}.db", *([] if round_ == 0 else [store])):
            spent.unlink()  # so later rounds do not write beside ever more files in the page cache

    server = LiveServer(folder / "store.db", folder / "pages.log")
    try:
        page_times(server, str(warmup.uuid), [c.id for c in warmup.configurations[:5]])
        members = [c.id for c in payload.configurations[:5]]
        figures |= page_times(server, str(payload.uuid), members)
        figures["pages server peak"] = peak_rss_mb(server.process.pid)
    except RuntimeError:
        print((folder / "pages.log").read_text()[-5000:], file=sys.stderr)
        raise
    finally:
        server.stop()
    return figures


def main() -> int:
    targets = Targets("store and pages at scale (invented assessment)")
    # Small, but with two repeats, so that warming up runs every code path the pages take at full size.
    warmup = synthetic_payload(Size(n_repeats=2, n_outer=3, n_inner=2, n_configs=6, n_samples=60), seed=2)
    with tempfile.TemporaryDirectory(prefix="foldwise-bench-") as tmp:
        results = {}
        for label, size in (("1/100", HUNDREDTH), ("1/10", TENTH), ("full", FULL)):
            results[label] = measure(size, Path(tmp) / label.replace("/", "_"), warmup)
            figures = results[label]
            for name in ("plain sqlite3", "ingest", "assessment page", "paired comparison",
                         "ensemble preview of 5"):
                targets.figure(f"{label}: {name}", figures[name], "s")
            targets.figure(f"{label}: ingest ÷ plain sqlite3", figures["ingest"] / figures["plain sqlite3"])
            targets.figure(f"{label}: ingest server peak memory", figures["ingest server peak"], "MB")
            targets.figure(f"{label}: pages server peak memory", figures["pages server peak"], "MB")

    full = results["full"]
    targets.at_most("ingest ÷ plain sqlite3 executemany", full["ingest"] / full["plain sqlite3"],
                    INGEST_LIMIT)
    for name in ("assessment page", "paired comparison", "ensemble preview of 5"):
        targets.at_most(f"{name}, server time", full[name], PAGE_LIMIT_S, "s")
    targets.at_most("pages server peak resident memory", full["pages server peak"], MEMORY_LIMIT_MB, "MB")
    for small, large in (("1/100", "1/10"), ("1/10", "full")):
        rows = results[large]["rows"] / results[small]["rows"]
        for name in ("ingest", "assessment page", "paired comparison", "ensemble preview of 5"):
            growth = results[large][name] / results[small][name]
            targets.at_most(f"growth {small} → {large} ({rows:g}× the rows): {name}", growth,
                            rows * GROWTH_SLACK)
    return targets.finish()


if __name__ == "__main__":
    sys.exit(main())
