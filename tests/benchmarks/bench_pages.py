"""Every page's server time, this checkout against an earlier one, in one run.

Two real ``foldwise serve`` processes on loopback, each on its own fresh store: this checkout's code, and
the code of another checkout given by ``--against`` (a git worktree of an earlier commit; its ``app/``
is put first on ``PYTHONPATH`` under the name ``foldwise``, so both run in this interpreter with the same
installed libraries). Each server is sent the same invented assessment (``synthetic.py``: seeded numpy
draws, nothing fitted; the payload is built by each checkout's own code, so either may read its own
format), then every page is requested on both, alternately: the first request (nothing of the assessment
cached) and the median of ``ROUNDS`` more. The ratio this ÷ earlier is what the run says; absolute times
depend on the machine's load, the ratio much less.

    python tests/benchmarks/bench_pages.py --against ../wt/old

Without ``--against`` only this checkout's times are printed.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx
from _common import LiveServer, Targets
from synthetic import TENTH, Size

ROUNDS = 5
SLOWER_LIMIT = 1.25  # this ÷ earlier, median of warm requests: timing noise on a shared machine allowed
SIZES = {"small": Size(n_repeats=1, n_outer=5, n_inner=5, n_configs=12, n_samples=500), "1/10": TENTH}
PAGES = ("/", "/assessments/{uuid}", "/assessments/{uuid}/distributions", "/assessments/{uuid}/fold-winners",
         "/assessments/{uuid}/optimism", "/assessments/{uuid}/inner", "/assessments/{uuid}/cost",
         "/assessments/{uuid}/compare", "/assessments/{uuid}/ranking")
_BUILD = """
import sys
sys.path.insert(0, {benchmarks!r})
from synthetic import Size, synthetic_payload
size = Size(**{size!r})
sys.stdout.write(synthetic_payload(size, seed=1).model_dump_json())
"""


class Checkout:
    """One checkout's server, its store and the payload its own code built."""

    def __init__(self, label: str, root: Path | None, folder: Path):
        self.label, self.root = label, root
        self.uuid = ""  # of the assessment pushed to this checkout's server (the payload draws its own)
        self.env = {}
        if root is not None:  # `import foldwise` finds the other checkout's app/ before the installed one
            shim = folder / "shim"
            shim.mkdir(parents=True)
            (shim / "foldwise").symlink_to(root / "app")
            self.env = {"PYTHONPATH": str(shim)}
        folder.mkdir(parents=True, exist_ok=True)
        self.server = LiveServer(folder / "store.db", folder / "server.log", env=self.env)

    def payload_json(self, size: Size) -> bytes:
        benchmarks = (self.root / "tests" / "benchmarks") if self.root else Path(__file__).resolve().parent
        code = _BUILD.format(benchmarks=str(benchmarks), size=size.__dict__)
        return subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                              env={**os.environ, **self.env}).stdout

    def push(self, body: bytes) -> None:
        response = httpx.post(f"{self.server.url}/api/assessments", content=body, timeout=600,
                              headers={"content-type": "application/json",
                                       "authorization": f"Bearer {self.server.write_key}"})
        if response.status_code not in (200, 201):
            raise RuntimeError(f"{self.label}: push answered {response.status_code}: {response.text[:500]}")

    def get(self, page: str) -> float:
        path = page.format(uuid=self.uuid)
        started = time.perf_counter()
        response = httpx.get(self.server.url + path, timeout=600, headers={"accept": "text/html"})
        spent = time.perf_counter() - started
        if response.status_code != 200:
            raise RuntimeError(f"{self.label}: GET {path} answered {response.status_code}: {response.text[:300]}")
        return spent


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--against", type=Path, help="another checkout (e.g. a worktree of an earlier commit)")
    arguments = parser.parse_args()
    targets = Targets("every page, this checkout" + (f" against {arguments.against}" if arguments.against else ""))
    with tempfile.TemporaryDirectory(prefix="foldwise-pages-") as tmp:
        for size_label, size in SIZES.items():
            checkouts = [Checkout("this", None, Path(tmp) / size_label / "this")]
            if arguments.against:
                checkouts.append(Checkout("earlier", arguments.against.resolve(), Path(tmp) / size_label / "earlier"))
            try:
                for checkout in checkouts:
                    body = checkout.payload_json(size)
                    checkout.push(body)
                    checkout.uuid = _uuid_of(body)
                print(f"{size_label}: {size.n_repeats} repeats × {size.n_outer} outer × {size.n_inner} inner × "
                      f"{size.n_configs} configurations", flush=True)
                for page in PAGES:
                    first = {checkout.label: checkout.get(page) for checkout in checkouts}
                    warm: dict[str, list[float]] = {checkout.label: [] for checkout in checkouts}
                    for _ in range(ROUNDS):  # alternately, so that the machine's load falls on both alike
                        for checkout in checkouts:
                            warm[checkout.label].append(checkout.get(page))
                    medians = {label: statistics.median(times) for label, times in warm.items()}
                    line = "  ".join(f"{label}: first {first[label] * 1000:.0f} ms, then {medians[label] * 1000:.0f} ms"
                                     for label in medians)
                    print(f"  {page.replace('{uuid}', '…')}: {line}", flush=True)
                    if "earlier" in medians:
                        targets.at_most(f"{size_label} {page.replace('{uuid}', '…')}: this ÷ earlier (median)",
                                        medians["this"] / medians["earlier"], SLOWER_LIMIT)
            finally:
                for checkout in checkouts:
                    checkout.server.stop()
    return targets.finish()


def _uuid_of(body: bytes) -> str:
    return json.loads(body)["uuid"]


if __name__ == "__main__":
    sys.exit(main())
