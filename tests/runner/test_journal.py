"""The journal of finished fits: a run killed or interrupted half way resumes to the uninterrupted result.

The reference is the same run without a journal; an assessment "equal" to it has the same inner and
outer score frames (every column but the times), the same winners and the same prediction bytes.
"""

from __future__ import annotations

import json
import os
import pickle
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import counted_fits
import numpy as np
import pytest
from counted_fits import N_FITS, assess
from pandas.testing import assert_frame_equal
from sklearn.ensemble import RandomForestClassifier
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from foldwise import nested_cv
from foldwise.assessment import Assessment
from foldwise.runner.journal import JournalMismatch

TIMES = ["fit_time", "score_time"]
WORKERS = 2


@pytest.fixture(scope="module")
def reference() -> Assessment:
    return assess(n_jobs=1)


def assert_same_results(mine: Assessment, reference: Assessment, *, times: bool = False) -> None:
    for name in ("inner_scores", "outer_scores"):
        left, right = getattr(mine, name), getattr(reference, name)
        assert len(left) > 0
        if not times:
            left, right = left.drop(columns=TIMES), right.drop(columns=TIMES)
        assert_frame_equal(left, right, check_exact=True)
    assert_frame_equal(mine.winners, reference.winners, check_exact=True)
    assert_frame_equal(mine.family_winners, reference.family_winners, check_exact=True)
    assert [(p.repeat, p.outer_fold, p.config, p.kind, p.data) for p in mine.payload.predictions] == \
        [(p.repeat, p.outer_fold, p.config, p.kind, p.data) for p in reference.payload.predictions]
    assert len(mine.payload.predictions) == len(reference.payload.predictions) > 0


def journaled(path: Path) -> dict[tuple, float]:
    """The fit time of every fit in the journal at ``path``, by key (read as any SQLite reader would)."""
    connection = sqlite3.connect(path)
    try:
        return {tuple(json.loads(key)): fit_time
                for key, fit_time in connection.execute("SELECT key, fit_time FROM journal_fits")}
    except sqlite3.OperationalError:  # the child has not made the table yet
        return {}
    finally:
        connection.close()


def test_a_run_killed_half_way_resumes_to_the_uninterrupted_assessment(tmp_path, reference):
    journal, log = tmp_path / "run.journal", tmp_path / "fits.log"
    environment = {**os.environ, counted_fits.LOG: str(log), counted_fits.PAUSE: "0.08",
                   "PYTHONPATH": os.pathsep.join([str(Path(__file__).parent), os.environ.get("PYTHONPATH", "")])}
    command = [sys.executable, "-c", "import counted_fits; counted_fits.main()", str(journal), str(tmp_path / "out")]
    # Its own session, so the kill takes the run's workers with it, as when a machine's job is killed.
    child = subprocess.Popen(command, env=environment, start_new_session=True)
    deadline = time.monotonic() + 180  # generous: a loaded machine starts the workers slowly
    while (not journal.exists() or len(journaled(journal)) < N_FITS // 2) and time.monotonic() < deadline:
        assert child.poll() is None, "the run ended before it could be killed"
        time.sleep(0.02)
    os.killpg(child.pid, signal.SIGKILL)
    child.wait()
    kept, started = journaled(journal), counted_fits.count(log)
    assert N_FITS // 2 <= len(kept) < N_FITS  # killed half way, with fits left to do

    finished = subprocess.run(command, env=environment, timeout=120)
    assert finished.returncode == 0
    rerun = counted_fits.count(log) - started
    assert rerun == N_FITS - len(kept)  # every fit not in the journal, and none that is
    # Fits done twice: at most those running at the kill and those just ended whose results had not yet
    # reached the journal (one job per dispatch with a journal, so one of each per worker).
    assert started + rerun - N_FITS <= 2 * WORKERS
    resumed = Assessment(pickle.loads((tmp_path / "out").read_bytes()))
    assert_same_results(resumed, reference)

    # The journaled fits' times are the killed run's, as the journal keeps them.
    frame = resumed.inner_scores
    for (level, s, *rest), fit_time in kept.items():
        if level == "inner":
            fold, config = rest
            rows = frame[(frame["outer_fold"] == s) & (frame["inner_fold"] == fold)
                         & (frame["config"] == resumed.payload.configurations[config].id)]
            assert (rows["fit_time"] == fit_time).all() and len(rows) == 2


def test_ctrl_c_keeps_the_journal_and_the_rerun_resumes(tmp_path, monkeypatch, capsys, reference):
    journal, log = tmp_path / "run.journal", tmp_path / "fits.log"
    monkeypatch.setenv(counted_fits.LOG, str(log))
    monkeypatch.setenv(counted_fits.INTERRUPT_AT, "10")
    with pytest.raises(KeyboardInterrupt):
        assess(checkpoint=journal, n_jobs=1)
    assert len(journaled(journal)) == 9  # every fit before the interrupted one
    message = capsys.readouterr().err
    assert "9 finished fits" in message and f"checkpoint={str(journal)!r}" in message and "resume" in message

    monkeypatch.delenv(counted_fits.INTERRUPT_AT)
    resumed = assess(checkpoint=journal, n_jobs=1)
    assert counted_fits.count(log) == 10 + N_FITS - 9  # the interrupted fit is the one done twice
    assert_same_results(resumed, reference)

    # A journal of the whole run: nothing is fitted again, and every time is the journal's.
    again = assess(checkpoint=journal, n_jobs=1)
    assert counted_fits.count(log) == 10 + N_FITS - 9
    assert_same_results(again, resumed, times=True)


@pytest.fixture(scope="module")
def finished_journal(tmp_path_factory, cancer) -> Path:
    path = tmp_path_factory.mktemp("journal") / "run.journal"
    X, y = cancer
    _small_run(X, y, checkpoint=path)
    return path


def _small_run(X, y, *, checkpoint, grid=(1, 2), scoring="roc_auc", **options):
    space = {"tree": (counted_fits.CountedClassifier(), {"max_depth": list(grid)})}
    return nested_cv(space, X, y, outer=2, inner=2, scoring=scoring, progress=False, checkpoint=checkpoint, **options)


@pytest.mark.parametrize(("change", "named"), [
    ({"X": "one value changed"}, "data"),
    ({"grid": (1, 3)}, "grid"),
    ({"scoring": "accuracy"}, "scorer"),
    ({"refit_all": False}, "options"),
])
def test_a_journal_of_another_run_is_refused_naming_what_changed(finished_journal, cancer, change, named):
    X, y = cancer
    if "X" in change:
        X = X.copy()
        X[7, 3] += 1.0
        change = {}
    before = finished_journal.read_bytes()
    with pytest.raises(JournalMismatch, match=rf"its {named} differs") as refused:
        _small_run(X, y, checkpoint=finished_journal, **change)
    assert "checkpoint_mode='overwrite'" in str(refused.value)
    assert finished_journal.read_bytes() == before  # refused before anything was written


def test_overwrite_starts_afresh(tmp_path, cancer, monkeypatch):
    X, y = cancer
    path, log = tmp_path / "run.journal", tmp_path / "fits.log"
    _small_run(X, y, checkpoint=path)
    monkeypatch.setenv(counted_fits.LOG, str(log))
    _small_run(X, y, checkpoint=path, grid=(1, 3), checkpoint_mode="overwrite")
    assert counted_fits.count(log) == 2 * 2 * (2 + 1) == len(journaled(path))


def test_files_that_are_not_journals_are_left_alone(tmp_path, cancer):
    X, y = cancer
    other = tmp_path / "notes.db"
    connection = sqlite3.connect(other)
    connection.execute("CREATE TABLE notes (text TEXT)")
    connection.commit()
    connection.close()
    text = tmp_path / "notes.txt"
    text.write_text("my notes")
    for path in (other, text):
        before = path.read_bytes()
        for mode in ("resume", "overwrite"):
            with pytest.raises(ValueError, match="is not a foldwise journal"):
                _small_run(X, y, checkpoint=path, checkpoint_mode=mode)
        assert path.read_bytes() == before
    with pytest.raises(ValueError, match="checkpoint_mode must be one of"):
        _small_run(X, y, checkpoint=tmp_path / "new.journal", checkpoint_mode="append")


def test_kept_models_come_back_from_the_journal(tmp_path, cancer, monkeypatch):
    X, y = cancer
    path, log = tmp_path / "run.journal", tmp_path / "fits.log"
    first = _small_run(X, y, checkpoint=path, keep_models=True)
    monkeypatch.setenv(counted_fits.LOG, str(log))
    again = _small_run(X, y, checkpoint=path, keep_models=True)
    assert counted_fits.count(log) == 0  # the winners' models too came from the journal
    assert [(m.repeat, m.outer_fold, m.config, m.skops) for m in again.payload.models] == \
        [(m.repeat, m.outer_fold, m.config, m.skops) for m in first.payload.models]
    assert len(first.payload.models) == 2
    assert np.isfinite(first.outer_scores["score"]).all()


def test_a_search_fitted_whole_refuses_a_checkpoint(tmp_path, cancer):
    X, y = cancer
    search = GridSearchCV(counted_fits.CountedClassifier(), {"max_depth": [1, 2]}, cv=2,
                          refit=lambda results: 0)  # a callable refit: foldwise fits the search whole
    with pytest.raises(ValueError, match="checkpoint needs a space foldwise expands"):
        nested_cv(search, X, y, outer=2, checkpoint=tmp_path / "run.journal", progress=False)
    assert not (tmp_path / "run.journal").exists()


def test_a_journal_missing_part_of_shared_and_grown_fits_resumes_to_the_same_scores(tmp_path, cancer):
    """Jobs that share a pipeline's steps or grow one forest are cut where the journal stops: the fits left
    are done as a smaller group, with the same scores (the final selection's fits are journaled too)."""
    X, y = cancer
    space = {"forest": (make_pipeline(StandardScaler(), RandomForestClassifier(random_state=0)),
                        {"randomforestclassifier__n_estimators": [4, 8],
                         "randomforestclassifier__max_depth": [2, 3]})}

    def run(**options):
        return nested_cv(space, X, y, outer=2, inner=2, scoring="roc_auc", progress=False, final=True, **options)

    path = tmp_path / "run.journal"
    whole = run(checkpoint=path)
    connection = sqlite3.connect(path)
    keys = [key for (key,) in connection.execute("SELECT key FROM journal_fits ORDER BY key")]
    assert len(keys) == 2 * 4 * (2 + 1) + 2 * 4  # every fit, the final selection's inner folds included
    dropped = keys[1::2]  # every other fit: each job loses some of its configurations
    connection.executemany("DELETE FROM journal_fits WHERE key = ?", [(key,) for key in dropped])
    connection.commit()
    connection.close()
    resumed = run(checkpoint=path)
    assert len(journaled(path)) == len(keys)
    assert_same_results(resumed, whole)
    left, right = resumed.payload.final, whole.payload.final
    assert (left.config, left.family_winners) == (right.config, right.family_winners)
    np.testing.assert_array_equal(left.inner_scores.score, right.inner_scores.score)  # NaN where NaN
