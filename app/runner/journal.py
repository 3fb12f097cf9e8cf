"""A journal of finished fits: an SQLite file that lets a long run resume after a crash or a Ctrl-C.

``nested_cv(..., checkpoint=PATH)`` writes every fit's result here as it arrives in the main process
(one row per fit: its key, each metric's score, its times, its outer prediction, its error text, the
kept model's skops bytes), one transaction per job the pool hands back. The file is in write-ahead-log
mode with ``synchronous=NORMAL``: a committed row survives the process being killed (the log is in the
operating system's hands at commit), though not a power cut of the machine before the log reaches the
disk. Fits in flight when the run stops (at most one per worker) are lost and run again.

A rerun with the same PATH first compares the journal's fingerprint with the new run's (see
``fingerprint``): the data, the space, the scorers, the splits, the package versions and the options
that change what is recorded. Any difference is refused with the parts named, since mixing results
of two different runs would give a nested estimate of neither; ``checkpoint_mode="overwrite"`` starts
afresh. A journaled fit is then taken as it is, fit times included, so the resumed assessment equals an
uninterrupted one in every score, prediction and winner.
"""

from __future__ import annotations

import hashlib
import json
import re
import sqlite3
from dataclasses import dataclass
from pathlib import Path

import joblib
import numpy as np
import skops.io
from sklearn.base import clone

from foldwise.runner.building import package_versions
from foldwise.runner.fitting import FitResult, FitTask
from foldwise.runner.metadata import without_requests
from foldwise.runner.scoring import FitProblem
from foldwise.runner.space import Space
from foldwise.runner.splits import Layout

FORMAT = "foldwise journal 2"  # 2 added problems: the metrics or predictions a fit that ran lost
MODES = ("resume", "overwrite")
_PARTS = ("data", "grid", "scorer", "splits", "versions", "options")
_SCHEMA = """
CREATE TABLE IF NOT EXISTS journal_meta (name TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS journal_fits (
    key TEXT PRIMARY KEY,           -- JSON of the fit's key, e.g. ["inner", 0, 2, 5]
    scores TEXT NOT NULL,           -- JSON {metric: score}, NaN for a failed metric
    fit_time REAL NOT NULL, score_time REAL NOT NULL, cpu_time REAL NOT NULL, inherited_time REAL NOT NULL,
    prediction_kind TEXT, prediction_shape TEXT, prediction BLOB,  -- float64, C order
    error TEXT,
    problems TEXT NOT NULL,         -- JSON [[stage, metric position or null, message], ...]
    model BLOB                      -- skops bytes of a kept fold winner
);
"""


class JournalMismatch(ValueError):
    """The journal at a path was written by a run that differs from this one."""


@dataclass(frozen=True)
class Fingerprint:
    parts: dict[str, str]  # part name -> hex digest, in _PARTS order


def fingerprint(*, X, y, groups, space: Space, layout: Layout, metrics: list[str], classes,
                options: dict) -> Fingerprint:
    """What makes a run's results what they are, one digest per part a user would change.

    - data: X, y and groups (``joblib.hash``, which reads arrays and frames by their bytes);
    - grid: each family's estimator (class and parameters) and every configuration's id, in order;
    - scorer: the metric names, in order (the first selects), and the class order of predictions;
    - splits: every outer and inner split's row positions;
    - versions: Python and the packages ``build_payload`` records;
    - options: the ``nested_cv`` options that change what is fitted or kept.
    """
    grid = [[family, f"{type(estimator).__module__}.{type(estimator).__qualname__}", _estimator_digest(estimator)]
            for family, estimator in space.estimators.items()]
    grid.append([candidate.id for candidate in space.candidates])
    splits = hashlib.sha256()
    for split in layout.splits:
        for rows in (split.train, split.test, *(part for pair in split.inner for part in pair)):
            splits.update(np.asarray(rows, dtype=np.int64).tobytes())
            splits.update(b"|")
        splits.update(f"{split.repeat}/{split.outer_fold};".encode())
    described = {
        "data": joblib.hash([X, y, groups], hash_name="sha1"),
        "grid": _digest(grid),
        "scorer": _digest([list(metrics), _jsonable(classes)]),
        "splits": splits.hexdigest(),
        "versions": _digest(package_versions()),
        "options": _digest(options),
    }
    return Fingerprint({part: described[part] for part in _PARTS})


class Journal:
    """The finished fits of one run, on disk; ``done`` holds those found when it was opened."""

    def __init__(self, path, expected: Fingerprint, *, mode: str = "resume"):
        if mode not in MODES:
            raise ValueError(f"checkpoint_mode must be one of {MODES}, got {mode!r}")
        self.path = Path(path)
        if self.path.exists() and not _is_journal(self.path):
            raise ValueError(f"{self.path} exists and is not a foldwise journal; pass a new path for checkpoint "
                             f"(foldwise neither reads nor overwrites other files)")
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if mode == "overwrite":
            for leftover in (self.path, *(self.path.with_name(self.path.name + end) for end in ("-wal", "-shm"))):
                leftover.unlink(missing_ok=True)
        self._connection = sqlite3.connect(self.path, isolation_level=None)  # transactions by hand
        self._connection.execute("PRAGMA journal_mode=WAL")
        self._connection.execute("PRAGMA synchronous=NORMAL")
        self._connection.executescript(_SCHEMA)
        stored = dict(self._connection.execute("SELECT name, value FROM journal_meta"))
        if stored:
            try:
                _refuse_other_runs(self.path, stored, expected)
            except JournalMismatch:
                self._connection.close()
                raise
        else:
            with self._connection:
                self._connection.execute("BEGIN")
                self._connection.executemany(
                    "INSERT INTO journal_meta VALUES (?, ?)",
                    [("format", FORMAT), *((f"fingerprint:{part}", digest)
                                           for part, digest in expected.parts.items())])
        self.done: dict[tuple, FitResult] = {
            result.key: result for result in map(_result_from_row, self._connection.execute(
                "SELECT key, scores, fit_time, score_time, cpu_time, inherited_time, prediction_kind, "
                "prediction_shape, prediction, error, problems, model FROM journal_fits"))}

    def result_for(self, task: FitTask) -> FitResult | None:
        """The journaled result of ``task``, if it holds all the task asks for."""
        found = self.done.get(task.key)
        if found is None or (task.keep_model and not found.error and found.model is None):
            return None  # a kept model skops could not write is fitted again (and warned about again)
        if task.predict and not found.error and found.prediction is None and \
                not any(problem.stage == "predict" for problem in found.problems):
            return None
        return found

    def record(self, results: list[FitResult]) -> None:
        """Write the results of one job in one transaction. A kept model is written as its skops file,
        and the result then carries those bytes, so the payload does not write it a second time."""
        rows = []
        for result in results:
            model = result.model if isinstance(result.model, bytes) else None
            if result.model is not None and model is None:
                try:
                    model = skops.io.dumps(without_requests(result.model))
                except Exception:  # skops refuses some objects; the payload warns about it at the end
                    model = None
                else:
                    result.model = model  # bytes: the payload takes them as the model's skops file
            kind, shape, data = (None, None, None) if result.prediction is None else (
                result.prediction[0], json.dumps(result.prediction[1].shape),
                np.ascontiguousarray(result.prediction[1], dtype=np.float64).tobytes())
            rows.append((json.dumps(list(result.key)), json.dumps(result.scores), result.fit_time,
                         result.score_time, result.cpu_time, result.inherited_time, kind, shape, data,
                         result.error, json.dumps([[p.stage, p.metric, p.message] for p in result.problems]),
                         model))
        with self._connection:
            self._connection.execute("BEGIN")
            self._connection.executemany(
                "INSERT OR REPLACE INTO journal_fits VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)

    def run_uuid(self, fresh: str) -> str:
        """The uuid of the run this journal belongs to: the one kept here, else ``fresh``, kept from now on, so
        that a resumed run goes on reporting (``live=``) and pushes its assessment under its first uuid."""
        kept = self._connection.execute("SELECT value FROM journal_meta WHERE name = 'run uuid'").fetchone()
        if kept is not None:
            return kept[0]
        with self._connection:
            self._connection.execute("BEGIN")
            self._connection.execute("INSERT INTO journal_meta VALUES ('run uuid', ?)", (fresh,))
        return fresh

    def forget_run_uuid(self) -> None:
        """The run finished: a later run on this journal is another run, with a uuid of its own."""
        with self._connection:
            self._connection.execute("BEGIN")
            self._connection.execute("DELETE FROM journal_meta WHERE name = 'run uuid'")

    def count(self) -> int:
        return self._connection.execute("SELECT count(*) FROM journal_fits").fetchone()[0]

    def close(self) -> None:
        self._connection.close()


def _refuse_other_runs(path: Path, stored: dict[str, str], mine: Fingerprint) -> None:
    if stored.get("format") != FORMAT:
        raise JournalMismatch(f"the journal at {path} is in format {stored.get('format')!r}, this foldwise writes "
                              f"{FORMAT!r}; pass checkpoint_mode='overwrite' to start afresh")
    changed = [part for part, digest in mine.parts.items() if stored.get(f"fingerprint:{part}") != digest]
    if changed:
        raise JournalMismatch(
            f"the journal at {path} was written by a different run: its {', '.join(changed)} "
            f"{'differs' if len(changed) == 1 else 'differ'} from this run's ({_WHAT_CHANGED_MEANS}); resuming "
            f"would mix the results of two runs. Pass checkpoint_mode='overwrite' to start afresh, or another "
            f"path to keep this journal")


_WHAT_CHANGED_MEANS = ("data: X, y or groups; grid: the families' estimators or configurations; scorer: the "
                       "metrics, what each scored, or the classes; splits: the outer or inner folds; versions: "
                       "Python or a package; options: refit_all, keep_predictions, keep_models, grow, "
                       "share_prefixes, params, error_score or metadata routing")


def _is_journal(path: Path) -> bool:
    if path.stat().st_size == 0:  # an empty file (a fresh temporary file) may become one
        return True
    connection = sqlite3.connect(path)
    try:
        row = connection.execute("SELECT value FROM journal_meta WHERE name = 'format'").fetchone()
    except sqlite3.DatabaseError:  # not SQLite, or SQLite without the journal's table
        return False
    finally:
        connection.close()
    return row is not None and str(row[0]).startswith("foldwise journal")


def _result_from_row(row) -> FitResult:
    key, scores, fit_time, score_time, cpu_time, inherited, kind, shape, data, error, problems, model = row
    prediction = None if kind is None else (kind, np.frombuffer(data, dtype=np.float64).reshape(json.loads(shape)))
    return FitResult(tuple(json.loads(key)), json.loads(scores), fit_time, score_time, cpu_time, prediction,
                     error, model, inherited, tuple(FitProblem(*problem) for problem in json.loads(problems)))


def _estimator_digest(estimator) -> str:
    """The estimator's parameters (and class) by ``joblib.hash``; by its repr, memory addresses taken out,
    for one that does not pickle (a lambda in a FunctionTransformer)."""
    try:
        return joblib.hash(clone(estimator), hash_name="sha1")  # its parameters, not what a fit left in it
    except Exception:
        return _digest(re.sub(r" at 0x[0-9a-fA-F]+", "", repr(estimator.get_params(deep=True))))


def _jsonable(value):
    return None if value is None else [repr(item) for item in value]


def _digest(value) -> str:
    return hashlib.sha256(json.dumps(value, sort_keys=True, default=repr).encode()).hexdigest()
