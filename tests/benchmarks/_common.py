"""What every benchmark shares: the machine's core count, printed figures and targets, a live server.

Benchmarks are plain scripts (``python tests/benchmarks/bench_<name>.py``, or ``make bench`` for all),
never collected by pytest. Each compares figures measured in its own process run, prints them, and
exits non-zero when a target is missed.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

sys.path.insert(1, str(Path(__file__).resolve().parents[1]))  # tests/, for the suite's LiveServer

from conftest import LiveServer  # noqa: E402  (tests/conftest.py: `foldwise serve` on a free loopback port)

__all__ = ["LiveServer", "Targets", "cores", "peak_rss_mb"]


def cores() -> int:
    """Cores this process may run on (the affinity mask, as joblib's loky counts them)."""
    return len(os.sched_getaffinity(0))


def peak_rss_mb(pid: int) -> float:
    """Peak resident memory of process ``pid`` so far (VmHWM in /proc/<pid>/status), in MB."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    raise RuntimeError(f"/proc/{pid}/status has no VmHWM line")


class Targets:
    """Figures printed as they are measured; targets checked, and the exit code set, at the end."""

    def __init__(self, title: str):
        self.missed: list[str] = []
        print(f"== {title} ==")
        print(f"machine: {os.cpu_count()} cores, {cores()} usable by this process")

    def figure(self, name: str, value: float, unit: str = "") -> None:
        print(f"  {name}: {value:.4g}{unit and ' ' + unit}", flush=True)

    def at_most(self, name: str, value: float, limit: float, unit: str = "") -> None:
        self._check(name, value, value <= limit, f"≤ {limit:g}{unit and ' ' + unit}", unit)

    def at_least(self, name: str, value: float, limit: float, unit: str = "") -> None:
        self._check(name, value, value >= limit, f"≥ {limit:g}{unit and ' ' + unit}", unit)

    def _check(self, name: str, value: float, met: bool, target: str, unit: str) -> None:
        verdict = "met" if met else "MISSED"
        print(f"  {name}: {value:.4g}{unit and ' ' + unit}  (target {target}: {verdict})", flush=True)
        if not met:
            self.missed.append(name)

    def finish(self) -> int:
        print(f"targets missed: {', '.join(self.missed)}" if self.missed else "every target met", flush=True)
        return 1 if self.missed else 0
