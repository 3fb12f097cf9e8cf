"""``nested_cv(..., live=URL)`` against a real server on loopback (the session's ``live_server``): what the live
view shows of each completed fold is what the finished assessment holds; an unreachable or refusing server
never stops the run; an interrupted run says so, and resumed from its journal it goes on under its uuid."""

from __future__ import annotations

import sqlite3

import counted_fits
import httpx
import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.client import CREATED, resend


def _space():
    return {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                         {"logisticregression__C": [0.01, 1.0]}),
            "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}


def _data():
    X, y = load_breast_cancer(return_X_y=True)
    return X[::3], y[::3]


@pytest.mark.server
@pytest.mark.parametrize("refit_all", [True, False])
def test_the_live_folds_are_the_finished_assessments_winners_and_outer_scores(live_server, refit_all):
    assessment = foldwise.nested_cv(_space(), *_data(), outer=3, inner=2, scoring=["roc_auc", "accuracy"], n_jobs=1,
                                    progress=False, name=f"live refit_all={refit_all}", refit_all=refit_all,
                                    live=live_server.url, live_interval=0.2)
    live = httpx.get(f"{live_server.url}/api/live/{assessment.uuid}").json()
    assert live["run"]["status"] == "finished"
    payload = assessment.payload
    refits = 3 * 4 if refit_all else len(payload.family_winners)  # every configuration, or the family winners
    assert live["run"]["fits_done"] == live["run"]["fits_total"] == 3 * 4 * 2 + refits
    ids = [config.id for config in payload.configurations]
    outer = {(r, o, c, m): s for r, o, c, m, s in zip(payload.outer_scores.repeat, payload.outer_scores.outer_fold,
                                                     payload.outer_scores.config, payload.outer_scores.metric,
                                                     payload.outer_scores.score, strict=True)}
    overall = {(w.repeat, w.outer_fold): w.config for w in payload.overall_winners}
    by_family = {}
    for w in payload.family_winners:
        by_family.setdefault((w.repeat, w.outer_fold), []).append(w.config)
    for fold in live["folds"]:
        key = (fold["repeat"], fold["outer_fold"])
        assert fold["done"]
        assert fold["winner"]["config"] == ids[overall[key]]
        assert [w["config"] for w in fold["family_winners"]] == [ids[c] for c in by_family[key]]
        for w, c in zip(fold["family_winners"], by_family[key], strict=True):
            assert w["outer_scores"] == [outer[(*key, c, m)] for m in range(2)]
    # One definition of the nested estimate: over every fold, the live view's is the assessment's.
    assert live["estimate"]["mean"] == assessment.nested_estimate.mean
    assert live["estimate"]["described"] == "partial: over 3 of 3 outer folds"


@pytest.mark.server
def test_an_unreachable_server_never_stops_the_run_and_the_assessment_is_spooled(tmp_path, monkeypatch, live_server,
                                                                                 unused_port):
    monkeypatch.setenv("FOLDWISE_SPOOL", str(tmp_path / "spool"))
    dead = f"http://127.0.0.1:{unused_port}"  # nothing listens there
    with pytest.warns(RuntimeWarning, match="foldwise resend"):
        watched = foldwise.nested_cv(_space(), *_data(), outer=2, inner=2, n_jobs=1, progress=False,
                                     name="live to nowhere", live=dead, live_interval=0.1)
    plain = foldwise.nested_cv(_space(), *_data(), outer=2, inner=2, n_jobs=1, progress=False, name="live to nowhere")
    # scikit-learn's fits are deterministic here: the run that reported to nobody is the same run
    np.testing.assert_array_equal(watched.outer_scores["score"], plain.outer_scores["score"])
    assert resend(spool_dir=tmp_path / "spool", url=live_server.url) == [(f"{watched.uuid}.json", CREATED)]


@pytest.mark.server
def test_a_server_that_refuses_the_reports_is_named_once_and_the_run_goes_on(live_server):
    with pytest.warns(RuntimeWarning) as warned:
        assessment = foldwise.nested_cv(_space(), *_data(), outer=2, inner=2, n_jobs=1, progress=False,
                                        name="wrong key", live=live_server.url, live_token="not-a-key",
                                        live_interval=0.1)
    messages = [str(w.message) for w in warned]
    assert sum("refused this run's live reports (401" in m for m in messages) == 1
    assert any("refused the assessment (401)" in m for m in messages)
    assert len(assessment.outer_scores) > 0


def test_live_is_refused_where_it_cannot_work():
    X, y = _data()
    whole = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]}, refit=lambda r: 0)
    with pytest.raises(ValueError, match="live needs a space foldwise expands"):
        foldwise.nested_cv(whole, X, y, outer=2, progress=False, live="http://127.0.0.1:9")
    with pytest.raises(ValueError, match="live must be the URL"):
        foldwise.nested_cv(_space(), X, y, outer=2, inner=2, progress=False, live="127.0.0.1:8000")
    with pytest.raises(ValueError, match="live_interval"):
        foldwise.nested_cv(_space(), X, y, outer=2, inner=2, progress=False, live="http://127.0.0.1:9",
                           live_interval=0)


@pytest.mark.server
def test_an_interrupted_run_says_so_and_resumed_goes_on_under_its_uuid(tmp_path, monkeypatch, live_server):
    journal = tmp_path / "run.journal"
    monkeypatch.setenv(counted_fits.LOG, str(tmp_path / "fits.log"))
    monkeypatch.setenv(counted_fits.INTERRUPT_AT, str(counted_fits.N_FITS // 2))
    with pytest.raises(KeyboardInterrupt):
        counted_fits.assess(checkpoint=journal, n_jobs=1, live=live_server.url, live_interval=0.1)
    connection = sqlite3.connect(journal)
    uuid = connection.execute("SELECT value FROM journal_meta WHERE name = 'run uuid'").fetchone()[0]
    connection.close()
    stopped = httpx.get(f"{live_server.url}/api/live/{uuid}").json()["run"]
    assert stopped["status"] == "stopped" and "interrupted (Ctrl-C)" in stopped["status_text"]
    assert 0 < stopped["fits_done"] < stopped["fits_total"]

    monkeypatch.delenv(counted_fits.INTERRUPT_AT)
    resumed = counted_fits.assess(checkpoint=journal, n_jobs=1, live=live_server.url, live_interval=0.1)
    assert resumed.uuid == uuid
    finished = httpx.get(f"{live_server.url}/api/live/{uuid}").json()["run"]
    assert finished["status"] == "finished" and finished["fits_done"] == counted_fits.N_FITS
    # The next run on this journal is another run: it gets a uuid of its own.
    again = counted_fits.assess(checkpoint=journal, n_jobs=1, live=live_server.url, live_interval=0.1)
    assert again.uuid != uuid
