"""Telling a foldwise server how a run is going: ``nested_cv(..., live=URL)``.

A background thread of the runner's process sends a ``LiveReport`` (``foldwise.live_payload``) when the
run starts, every ``interval`` seconds after, at once when an outer fold completes, and a last one when
the run ends or stops. Each report holds the whole state so far, so a server that could not be reached
for a while is caught up by the next report that gets through, and the run never waits for it: a failed
send is dropped and the run goes on. A server that refuses the reports (a wrong key, another run under
the uuid) is not asked again; the run says so once, at its end.

A fold is complete when all its inner fits are in (its winners are then chosen by
``foldwise.definitions.select_in_fold``, as the finished assessment chooses them) and so are the outer
refits it needs: every configuration's with ``refit_all``, else its family winners'.
"""

from __future__ import annotations

import threading
import time
import warnings
from datetime import UTC, datetime, timedelta

import httpx
import numpy as np

from foldwise.client import write_key
from foldwise.definitions import inner_mean, select_in_fold
from foldwise.live_payload import LiveConfiguration, LiveFold, LiveReport, LiveWinner
from foldwise.runner.fitting import FitResult
from foldwise.runner.space import Space
from foldwise.runner.splits import Layout

DEFAULT_INTERVAL = 5.0  # seconds between reports: a progress bar that moves, for a request per 5 s
_REFUSALS = (400, 401, 403, 404, 405, 409, 413, 415, 422)  # sending the same again would not help


class LiveReporter:
    def __init__(self, url: str, uuid: str, *, token: str | None, interval: float, name: str,
                 dataset: str | None, task: str, metrics: list[str], space: Space, layout: Layout,
                 refit_all: bool):
        if not isinstance(url, str) or not url.startswith(("http://", "https://")):
            raise ValueError(f"live must be the URL of a foldwise server such as 'http://127.0.0.1:8000'; "
                             f"received {url!r}")
        if not (isinstance(interval, int | float) and 0 < interval <= 3600):
            raise ValueError(f"live_interval must be a number of seconds in (0, 3600]; received {interval!r}")
        self.endpoint = url.rstrip("/") + f"/api/live/{uuid}"
        self.interval, self.token = float(interval), token or write_key()
        self._fixed = {"name": name, "dataset": dataset, "task": task, "metrics": list(metrics),
                       "n_repeats": layout.n_repeats, "n_outer_folds": layout.n_outer_folds,
                       "n_inner_folds": layout.n_inner_folds,
                       "configurations": [LiveConfiguration(id=c.id, family=c.family) for c in space.candidates]}
        self._metrics, self._layout, self._refit_all = list(metrics), layout, refit_all
        self._families = [space.positions_of(family) for family in space.estimators]
        n_configs = len(space.candidates)
        self._inner = [np.full((n_configs, layout.n_inner_folds), np.nan) for _ in layout.splits]
        self._inner_left = [n_configs * layout.n_inner_folds for _ in layout.splits]
        self._outer: list[dict[int, list[float | None]]] = [{} for _ in layout.splits]
        self._choices: dict[int, tuple[list[int | None], int | None]] = {}
        self._folds: dict[int, LiveFold] = {}
        self._lock, self._wake, self._ending = threading.Lock(), threading.Event(), threading.Event()
        self._started_at, self._clock = datetime.now(UTC), time.monotonic()
        self.fits_total, self.fits_done, self._ran, self._fit_times = 1, 0, 0, 0.0
        self.refused: str | None = None
        self.delivered = 0
        self._thread = threading.Thread(target=self._loop, name="foldwise-live", daemon=True)

    def start(self, fits_total: int) -> None:
        self.fits_total = max(1, fits_total)
        self._thread.start()

    def arrived(self, results: list[FitResult], *, resumed: bool = False) -> None:
        """Count finished fits (``resumed``: taken from a journal, not run now) and complete the folds they close."""
        completed = False
        with self._lock:
            self.fits_done += len(results)
            if not resumed:
                self._ran += len(results)
                self._fit_times += sum(result.fit_time for result in results)
            for result in results:
                completed |= self._take(result)
        if completed:
            self._wake.set()

    def end(self, state: str, reason: str | None = None) -> None:
        """Send the last report (``"done"``, or ``"stopped"`` with its reason) and stop the thread; warn once if
        the server refused the reports."""
        self._ending.set()
        self._wake.set()
        if self._thread.is_alive():
            self._thread.join(timeout=self._timeout() + 1)
        if self.refused is None:
            self._send(self.report(state=state, reason=reason))
        if self.refused is not None:
            warnings.warn(f"the foldwise server at {self.endpoint} refused this run's live reports ({self.refused}); "
                          f"the run went on without them", RuntimeWarning, stacklevel=3)

    def report(self, *, state: str = "running", reason: str | None = None) -> LiveReport:
        with self._lock:
            now = datetime.now(UTC)
            pace = (time.monotonic() - self._clock) / self._ran if self._ran else None
            left = max(0, self.fits_total - self.fits_done)
            return LiveReport(
                **self._fixed, started_at=self._started_at, sent_at=now, state=state,
                reason=None if reason is None else reason[:2000], fits_done=min(self.fits_done, self.fits_total),
                fits_total=self.fits_total, seconds_per_fit=pace,
                mean_fit_time=self._fit_times / self._ran if self._ran else None,
                expected_end=None if pace is None else now + timedelta(seconds=left * pace),
                folds=[self._folds[s] for s in sorted(self._folds)])

    def _take(self, result: FitResult) -> bool:
        """Note one fit; True when it completes its outer fold."""
        level, s = result.key[0], result.key[1]
        if level == "inner":
            self._inner[s][result.key[3], result.key[2]] = result.scores[self._metrics[0]]
            self._inner_left[s] -= 1
            if self._inner_left[s] == 0:
                chosen = select_in_fold(self._inner[s], self._families)
                self._choices[s] = (chosen.family, chosen.overall)
        elif level == "outer":
            self._outer[s][result.key[2]] = [_score(result.scores[metric]) for metric in self._metrics]
        else:
            return False  # the final selection's fits are counted, and belong to no outer fold
        return s not in self._folds and self._complete(s)

    def _complete(self, s: int) -> bool:
        if s not in self._choices:
            return False
        family_winners, overall = self._choices[s]
        needed = range(len(self._inner[s])) if self._refit_all else [c for c in family_winners if c is not None]
        if any(c not in self._outer[s] for c in needed):
            return False
        means = inner_mean(self._inner[s])
        split = self._layout.splits[s]
        self._folds[s] = LiveFold(
            repeat=split.repeat, outer_fold=split.outer_fold, n_train=len(split.train), n_test=len(split.test),
            winners=[LiveWinner(config=c, inner_mean=_score(means[c]), outer_scores=self._outer[s][c])
                     for c in family_winners if c is not None], overall=overall)
        return True

    def _loop(self) -> None:
        while self.refused is None and not self._ending.is_set():
            self._send(self.report())
            self._wake.wait(self.interval)
            self._wake.clear()

    def _send(self, report: LiveReport) -> None:
        headers = {"authorization": f"Bearer {self.token}"} if self.token else {}
        try:
            response = httpx.post(self.endpoint, content=report.model_dump_json(), timeout=self._timeout(),
                                  headers={**headers, "content-type": "application/json"})
        except httpx.HTTPError:
            return  # unreachable now: the next report carries everything this one did
        if response.status_code in _REFUSALS:
            self.refused = f"{response.status_code}: {response.text[:500]}"
        elif response.is_success:
            self.delivered += 1

    def _timeout(self) -> float:
        return min(10.0, max(2.0, 2 * self.interval))


def _score(value) -> float | None:
    value = float(value)
    return None if not np.isfinite(value) else value
