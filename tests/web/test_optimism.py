"""The optimism page and its JSON, against numpy and scipy.stats on the runner's own frames."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _pairs(assessment, metric: str, flag: str) -> list[tuple]:
    """(family, inner mean, outer score) of each flagged fold winner, with the inner mean taken by numpy."""
    inner, outer = assessment.inner_scores, assessment.outer_scores
    inner, outer = inner[inner["metric"] == metric], outer[(outer["metric"] == metric) & outer[flag]]
    pairs = []
    for row in outer.itertuples():
        scores = inner[(inner["repeat"] == row.repeat) & (inner["outer_fold"] == row.outer_fold)
                       & (inner["config"] == row.config)]["score"].to_numpy()
        pairs.append((row.family, float(np.mean(scores)), float(row.score)))
    return pairs


def _assert_t_summary(served: dict, values: np.ndarray) -> None:
    # Student (1908) t interval for the mean, from scipy.stats.t.interval.
    n, mean, sd = values.size, float(np.mean(values)), float(np.std(values, ddof=1))
    low, high = stats.t.interval(0.95, n - 1, loc=mean, scale=sd / np.sqrt(n))
    assert served["n"] == n and served["n_missing"] == 0
    assert served["mean"] == pytest.approx(mean, abs=1e-12)
    assert served["sd"] == pytest.approx(sd, abs=1e-12)
    assert (served["ci_low"], served["ci_high"]) == pytest.approx((low, high), abs=1e-12)


@pytest.fixture(scope="module")
def winners_only():
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    return foldwise.nested_cv(space, X[::4], y[::4], outer=3, inner=2, n_jobs=1, progress=False,
                              refit_all=False, name="winners only")


@pytest.mark.parametrize("metric", ["roc_auc", "accuracy"])
def test_mean_optimism_of_the_overall_winners(client, small_assessment, metric):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/optimism", params={"metric": metric}).json()
    pairs = _pairs(small_assessment, metric, "overall_winner")
    optimism = np.array([inner - outer for _, inner, outer in pairs])
    assert [s["label"] for s in body["summaries"]] == ["overall winner"]
    _assert_t_summary(body["summaries"][0], optimism)
    assert sorted(p["optimism"] for p in body["points"]) == pytest.approx(sorted(optimism), abs=1e-12)
    assert sorted(p["inner_mean"] for p in body["points"]) == pytest.approx(sorted(i for _, i, _ in pairs))


def test_family_level_plots_every_family_winner(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/optimism", params={"level": "family"}).json()
    assert body["level"] == "family"
    pairs = _pairs(small_assessment, "roc_auc", "family_winner")
    assert len(body["points"]) == len(pairs) == 6
    by_family = {s["family"]: s for s in body["summaries"][1:]}
    for family in ("logistic", "tree"):
        mine = np.array([inner - outer for f, inner, outer in pairs if f == family])
        _assert_t_summary(by_family[family], mine)


def test_rank_agreement_per_outer_fold_matches_scipy(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/optimism").json()
    assert body["agreement_message"] == ""
    pairs_by_fold = {}
    inner, outer = small_assessment.inner_scores, small_assessment.outer_scores
    inner, outer = inner[inner["metric"] == "roc_auc"], outer[outer["metric"] == "roc_auc"]
    for row in outer.itertuples():  # every configuration was refit: one outer score each
        scores = inner[(inner["repeat"] == row.repeat) & (inner["outer_fold"] == row.outer_fold)
                       & (inner["config"] == row.config)]["score"].to_numpy()
        pairs_by_fold.setdefault((row.repeat, row.outer_fold), []).append((np.mean(scores), row.score))
    assert len(body["agreement"]) == len(pairs_by_fold) == 3
    rhos, taus = [], []
    for fold in body["agreement"]:
        means, scores = np.array(pairs_by_fold[(fold["repeat"], fold["outer_fold"])]).T
        # Spearman (1904) and Kendall's tau-b (1938), as scipy.stats computes them.
        rho, rho_p = stats.spearmanr(means, scores)
        tau, tau_p = stats.kendalltau(means, scores)
        assert fold["n"] == 5
        assert (fold["spearman_rho"], fold["spearman_p"]) == pytest.approx((rho, rho_p), abs=1e-12)
        assert (fold["kendall_tau"], fold["kendall_p"]) == pytest.approx((tau, tau_p), abs=1e-12)
        rhos.append(rho)
        taus.append(tau)
    assert body["agreement_mean"]["spearman_rho"]["mean"] == pytest.approx(np.mean(rhos), abs=1e-12)
    assert body["agreement_mean"]["kendall_tau"]["mean"] == pytest.approx(np.mean(taus), abs=1e-12)


def test_page_explains_optimism_and_draws_the_identity_line(client, small_assessment):
    _push(client, small_assessment)
    page = client.get(f"/assessments/{small_assessment.uuid}/optimism", params={"level": "family"}).text
    assert "inner mean − outer score" in page and "flattered" in page
    assert '<option value="family" selected>' in page
    found = re.search(r'<script type="application/json" id="optimism">(.*?)</script>', page, re.S)
    traces = json.loads(found.group(1))["data"]
    identity = traces[0]
    assert identity["mode"] == "lines" and identity["x"] == identity["y"]
    assert sum(len(trace["x"]) for trace in traces[1:]) == 6
    assert 'id="rank-agreement"' in page


def test_without_refit_all_agreement_is_replaced_by_a_reason(client, winners_only):
    _push(client, winners_only)
    body = client.get(f"/api/assessments/{winners_only.uuid}/optimism").json()
    assert body["agreement"] == [] and body["agreement_mean"] == {}
    assert "refit_all" in body["agreement_message"]
    assert body["summaries"][0]["n"] == 3  # optimism itself needs only the winners' outer scores
    page = client.get(f"/assessments/{winners_only.uuid}/optimism").text
    assert 'id="agreement-message"' in page and 'id="rank-agreement"' not in page


def _edges():
    """Hand-recorded scores, made up for this check: family 'dead' fails every outer fit, and on outer fold 1
    the second configuration of 'a' and of 'b' fails too, leaving 2 configurations with both scores there."""
    recorder = foldwise.Recorder("optimism edges", task="classification", metrics=["accuracy"], n_samples=30)
    for fold in range(3):
        recorder.outer_fold(0, fold, n_train=20, test=np.arange(fold * 10, fold * 10 + 10))
        for family, configs in (("a", [1, 2]), ("b", [1, 2]), ("dead", [1])):
            for c in configs:
                for inner_fold in range(2):
                    recorder.inner(0, fold, inner_fold, family=family, params={"c": c},
                                   scores={"accuracy": 0.6 + 0.05 * c + 0.01 * inner_fold + 0.02 * fold})
                fitted = family != "dead" and not (fold == 1 and c == 2)
                recorder.outer(0, fold, family=family, params={"c": c}, error=None if fitted else "made up",
                               scores={"accuracy": 0.55 + 0.07 * c - 0.01 * fold if fitted else None})
    return recorder.finish()


def test_undefined_optimism_and_agreement_are_null_and_counted_not_dropped(client):
    assessment = _edges()
    _push(client, assessment)
    body = client.get(f"/api/assessments/{assessment.uuid}/optimism", params={"level": "family"}).json()
    dead = next(row for row in body["summaries"] if row["family"] == "dead")
    assert (dead["n"], dead["n_missing"], dead["mean"], dead["ci_low"]) == (0, 3, None, None)
    # Reference: the fold winners' optimism by a plain loop over this test's own frames, with numpy.
    optimism = [inner - outer for family, inner, outer in _pairs(assessment, "accuracy", "family_winner")
                if family == "a" and not np.isnan(outer)]
    served = next(row for row in body["summaries"] if row["family"] == "a")
    assert (served["n"], served["n_missing"]) == (len(optimism), 3 - len(optimism))
    assert served["mean"] == pytest.approx(np.mean(optimism), abs=1e-12)
    short = [fold for fold in body["agreement"] if fold["spearman_rho"] is None]
    assert [(fold["outer_fold"], fold["n"], fold["n_missing"]) for fold in short] == [(1, 2, 3)]
    assert "at least 3" in short[0]["note"]
    assert body["agreement_mean"]["spearman_rho"]["n"] == 2 and body["agreement_mean"]["spearman_rho"]["n_missing"] == 1
    page = client.get(f"/assessments/{assessment.uuid}/optimism", params={"level": "family"}).text
    dead_row = page[page.index('data-family="dead"'):]
    dead_row = dead_row[:dead_row.index("</tr>")]
    assert "–" in dead_row and "– – –" not in dead_row and "nan" not in dead_row and "flatter" not in dead_row
