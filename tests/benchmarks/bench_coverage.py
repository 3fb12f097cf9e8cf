"""Coverage of the intervals beside the nested estimate, by simulation against a known truth (`make coverage`).

Four invented data-generating processes (coverage_simulation.py: a logistic and a nonlinear
classification, a sparse and a nonlinear regression) at n = 200 and 1,000 rows; each replication
runs ``foldwise.nested_cv`` with 3 repeats × 5 outer × 5 inner folds, and its first repeat alone is
the design without repeats on the same data. The truth is the score, on 50,000 independent rows,
of the model the procedure ships (selection on all n rows, winner refitted). For every setting,
design and interval method it prints coverage at nominal 90% and 95% with Monte-Carlo standard
errors, the mean width of the 95% interval and the bias of the method's estimate against the truth
(item 4: nested CV trains on 4/5 of the rows, so its estimate is pessimistic for the model
refitted on all of them).

Targets for the headline interval (corrected_t), exit status 1 when one is missed or the simulation is
incomplete:
- coverage at nominal 90% within [0.87, 0.98] in every setting and design, at nominal 95% ≥ 0.92;
- mean width ≤ 1.6 × the plain Student-t interval over the outer folds of one unrepeated run on the
  same data. On the repeated design the plain t over all 15 folds is narrower by a fixed factor
  (√(1 + J·n_test/n_train) = √4.75 ≈ 2.18 at J = 15) precisely because it is wrong there, so that
  ratio is printed but not targeted.

Replications are cached one file each under .foldwise/coverage/ (a run may be stopped and resumed;
``--minutes`` stops scheduling new ones after that long). Run:
``python tests/benchmarks/bench_coverage.py [--replications 200] [--jobs 2] [--minutes M]``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one thread per worker: many tiny fits, two cores
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import joblib  # noqa: E402
from _common import Targets, cores  # noqa: E402
from coverage_simulation import LEVELS, METHODS, PROCESSES, replicate, summarise  # noqa: E402

CACHE = Path(".foldwise/coverage/v1")  # a new version when the simulation changes: old results no longer apply
SIZES = (200, 1000)
DESIGNS = {"single": "5 outer × 5 inner", "repeated": "3 repeats × 5 outer × 5 inner"}


def _path(name: str, n: int, seed: int) -> Path:
    return CACHE / f"{name.replace(' ', '-')}-n{n}-seed{seed}.json"


def _run_one(name: str, n: int, seed: int) -> tuple[str, int, int, dict]:
    return name, n, seed, replicate(name, n, seed)


def _fill_cache(replications: int, jobs: int, minutes: float | None) -> None:
    CACHE.mkdir(parents=True, exist_ok=True)
    # Seed-major order, so a stopped run leaves every setting with about as many replications.
    todo = [(name, n, seed) for seed in range(replications) for name in PROCESSES for n in SIZES
            if not _path(name, n, seed).exists()]
    print(f"{len(todo)} replications to run on {jobs} workers; cached under {CACHE}/", flush=True)
    started, batch = time.monotonic(), max(1, 4 * jobs)
    with joblib.Parallel(n_jobs=jobs, return_as="generator_unordered") as pool:
        for first in range(0, len(todo), batch):
            if minutes is not None and time.monotonic() - started > 60 * minutes:
                print(f"stopping after {minutes:g} minutes; run again to continue", flush=True)
                return
            for name, n, seed, result in pool(joblib.delayed(_run_one)(*task) for task in todo[first:first + batch]):
                _path(name, n, seed).write_text(json.dumps(result))
            done = min(first + batch, len(todo))
            print(f"  {done}/{len(todo)} after {(time.monotonic() - started) / 60:.1f} min", flush=True)


def _load(name: str, n: int, replications: int) -> list[dict]:
    paths = [_path(name, n, seed) for seed in range(replications)]
    return [json.loads(path.read_text()) for path in paths if path.exists()]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replications", type=int, default=200)
    parser.add_argument("--jobs", type=int, default=cores())
    parser.add_argument("--minutes", type=float, default=None, help="stop scheduling new replications after")
    parser.add_argument("--table-only", action="store_true", help="print the table from the cache, run nothing")
    args = parser.parse_args(argv)
    started = time.monotonic()
    if not args.table_only:
        _fill_cache(args.replications, args.jobs, args.minutes)

    targets = Targets("coverage of the intervals beside the nested estimate")
    header = ("| setting | design | interval | reps | coverage at 90% | coverage at 95% | mean width (95%) "
              "| width ÷ plain t, one run | bias of its estimate |")
    print(header)
    print("|---" * (header.count("|") - 1) + "|")
    incomplete = []
    for name, process in PROCESSES.items():
        for n in SIZES:
            results = _load(name, n, args.replications)
            if len(results) < args.replications:
                incomplete.append(f"{name} n={n}: {len(results)} of {args.replications}")
            if not results:
                continue
            plain_single = summarise(results, "single", "student_t_spread", 0.95)["width"]
            for design, label in DESIGNS.items():
                for method in METHODS:
                    at = {level: summarise(results, design, method, level) for level in LEVELS}
                    if at[0.95] is None:
                        continue
                    print(f"| {name} ({process.metric}), n = {n} | {label} | {method} | {at[0.95]['n']} "
                          f"| {at[0.9]['coverage']:.3f} ± {at[0.9]['se']:.3f} "
                          f"| {at[0.95]['coverage']:.3f} ± {at[0.95]['se']:.3f} "
                          f"| {at[0.95]['width']:.4g} | {at[0.95]['width'] / plain_single:.2f} "
                          f"| {at[0.95]['bias']:+.4f} ± {at[0.95]['bias_se']:.4f} |", flush=True)
                    if method == "corrected_t":
                        where = f"{name} n={n} {design}"
                        targets.at_least(f"{where}: coverage at 90%", at[0.9]["coverage"], 0.87)
                        targets.at_most(f"{where}: coverage at 90%", at[0.9]["coverage"], 0.98)
                        targets.at_least(f"{where}: coverage at 95%", at[0.95]["coverage"], 0.92)
                        targets.at_most(f"{where}: width ÷ plain t of one run", at[0.95]["width"] / plain_single,
                                        1.6)
    cpu = [r["cpu_seconds"] for name in PROCESSES for n in SIZES for r in _load(name, n, args.replications)
           if "cpu_seconds" in r]
    if cpu:  # what the whole simulation costs on idle cores, whatever else ran beside this run
        targets.figure(f"CPU time per replication (mean of {len(cpu)})", sum(cpu) / len(cpu), "s")
        targets.figure(f"whole simulation on {args.jobs} idle cores, estimated",
                       sum(cpu) / len(cpu) * len(PROCESSES) * len(SIZES) * args.replications / args.jobs / 60, "min")
    targets.figure("wall time", (time.monotonic() - started) / 60, "min")
    if incomplete:
        print("incomplete (run again to continue): " + "; ".join(incomplete))
        targets.missed.append("complete simulation")
    return targets.finish()


if __name__ == "__main__":
    sys.exit(main())
