"""Comparing two assessments: paired when their outer folds match, summaries only when not; checked against
scipy.stats and baycomp on real nested CVs."""

from __future__ import annotations

import math

import baycomp
import numpy as np
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.naive_bayes import GaussianNB
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise

DATA_X, DATA_Y = load_breast_cancer(return_X_y=True)
X, Y = DATA_X[::3], DATA_Y[::3]  # 190 rows


def _space(c=(0.1, 1.0), depth=(1, 3), bayes=True):
    space = {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(solver="liblinear")),
                     {"logisticregression__C": list(c)}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": list(depth)}),
    }
    if bayes:
        space["bayes"] = (GaussianNB(), {"var_smoothing": [1e-9, 1e-3]})
    return space


def _run(space, name, *, seed=0, repeats=2, rows=3, scoring=("roc_auc", "accuracy")):
    outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=repeats, random_state=seed)
    return foldwise.nested_cv(space, DATA_X[::rows], DATA_Y[::rows], outer=outer, inner=3,
                              scoring=list(scoring), n_jobs=1, progress=False, name=name)


@pytest.fixture(scope="module")
def runs():
    return {
        "x": _run(_space(), "x: three families"),
        "y": _run(_space(c=(0.01, 10.0), depth=(2, 5), bayes=False), "y: other grids, same outer splits"),
        "other_split": _run(_space(), "z: another random_state", seed=1),
        "other_rows": _run(_space(bayes=False), "w: every fourth row", rows=4, scoring=["roc_auc"]),
        "one_repeat": _run(_space(c=(1.0,), depth=(3,), bayes=False), "v: one repeat", repeats=1),
    }


@pytest.fixture
def stored(client, runs):
    for assessment in runs.values():
        response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                               headers={"content-type": "application/json"})
        assert response.status_code == 201, response.text
    return runs


def _winner_scores(assessment, metric: str, family: str | None = None) -> np.ndarray:
    """Per outer fold, the outer score of the configuration (of ``family``, or of all) with the best mean
    inner score on the selection metric, ties to the first as GridSearchCV's best_index_ (scikit-learn)."""
    inner, outer = assessment.inner_scores, assessment.outer_scores
    design = assessment.payload.design
    scores = []
    for repeat in range(design.n_repeats):
        for fold in range(design.n_outer_folds):
            mine = inner[(inner["repeat"] == repeat) & (inner["outer_fold"] == fold)
                         & (inner["metric"] == assessment.selection_metric)]
            if family is not None:
                mine = mine[mine["family"] == family]
            means = {config: rows["score"].to_numpy().mean()
                     for config, rows in mine.groupby("config", sort=False)}
            best = max(means, key=lambda config: (means[config], -list(means).index(config)))
            chosen = outer[(outer["repeat"] == repeat) & (outer["outer_fold"] == fold)
                           & (outer["config"] == best) & (outer["metric"] == metric)]
            scores.append(float(chosen["score"].iloc[0]))
    return np.array(scores)


def _fold_sizes():
    # Reference: a plain loop over the shared outer splitter.
    pairs = [(len(train), len(test)) for train, test in
             RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0).split(X, Y)]
    return np.array(pairs, float).T


def test_same_outer_splits_pair_up_family_by_family(client, stored):
    x, y = stored["x"], stored["y"]
    body = client.get("/api/compare", params={"x": x.uuid, "y": y.uuid, "rope": 0.01}).json()
    assert body["paired"] is True and body["reason"] is None
    assert body["fingerprints"]["x"] == body["fingerprints"]["y"] == x.payload.fingerprint()
    kinds = [c["kind"] for c in body["comparisons"]]
    assert kinds == ["selection procedure", "best family", "family", "family"]
    by_family = {c["x"]: c for c in body["comparisons"] if c["kind"] == "family"}
    assert sorted(by_family) == ["logistic", "tree"]  # bayes is only in x
    n_train, n_test = _fold_sizes()
    for family, comparison in by_family.items():
        a, b = _winner_scores(x, "roc_auc", family), _winner_scores(y, "roc_auc", family)
        result = comparison["result"]
        np.testing.assert_allclose([f["diff"] for f in comparison["folds"]], a - b, rtol=0, atol=1e-12)
        # Reference: Nadeau and Bengio (2003), Machine Learning 52, corrected t by hand with scipy.stats.t.
        d = a - b
        t = d.mean() / math.sqrt((1 / 6 + n_test.mean() / n_train.mean()) * d.var(ddof=1))
        assert result["corrected_t"] == pytest.approx(t, rel=1e-9)
        assert result["corrected_p"] == pytest.approx(2 * stats.t.sf(abs(t), 5), rel=1e-9)
        # Reference: baycomp.CorrelatedTTest.probs (Corani and Benavoli, 2015): (P(x better), P(rope),
        # P(y better)) for diff = y - x, rho = 1/3 with 3 folds per run, equal to ours for 190 rows.
        expected = baycomp.CorrelatedTTest.probs(a, b, rope=0.01, runs=2)
        probabilities = (result["bayes_a"], result["bayes_rope"], result["bayes_b"])
        assert probabilities == pytest.approx(expected, abs=1e-9)
        # Reference: scipy.stats.wilcoxon.
        assert result["wilcoxon_p"] == pytest.approx(stats.wilcoxon(a, b).pvalue, rel=1e-12)
    selection = body["comparisons"][0]["result"]
    overall = _winner_scores(x, "roc_auc") - _winner_scores(y, "roc_auc")
    assert selection["mean_diff"] == pytest.approx(overall.mean(), abs=1e-12)
    assert selection["sd_diff"] == pytest.approx(overall.std(ddof=1), abs=1e-12)
    sides = (("x", x, ["logistic", "tree", "bayes"]), ("y", y, ["logistic", "tree"]))
    best = {name: max(families, key=lambda f: _winner_scores(run, "roc_auc", f).mean())
            for name, run, families in sides}
    assert (body["comparisons"][1]["x"], body["comparisons"][1]["y"]) == (best["x"], best["y"])


def test_an_assessment_against_itself_is_no_difference(client, stored):
    x = stored["x"]
    body = client.get("/api/compare", params={"x": x.uuid, "y": x.uuid}).json()
    assert body["paired"] is True
    assert all(c["result"]["identical"] and c["result"]["verdict"].startswith("no difference")
               for c in body["comparisons"])


def test_another_outer_split_is_not_paired_and_summaries_match_scipy(client, stored):
    x, z = stored["x"], stored["other_split"]
    body = client.get("/api/compare", params={"x": x.uuid, "y": z.uuid, "metric": "accuracy"}).json()
    assert body["paired"] is False and body["comparisons"] == []
    assert body["fingerprints"]["x"] != body["fingerprints"]["y"]
    assert "the folds hold different rows" in body["reason"]
    summaries = {row["candidate"]: row for row in body["summaries"]}
    assert list(summaries) == ["overall fold winners", "logistic", "tree", "bayes"]
    for side, run in (("x", x), ("y", z)):
        for candidate, row in summaries.items():
            family = None if candidate == "overall fold winners" else candidate
            scores = _winner_scores(run, "accuracy", family)
            # Reference: the corrected resampled t interval (Nadeau and Bengio, 2003), written out here with
            # scipy.stats.t.ppf: mean ± t_{0.975, n-1} · sqrt((1/n + n_test/n_train) · s²), the fold sizes
            # averaged over the outer folds.
            n_train = np.mean([fold.n_train for fold in run.payload.outer_folds])
            n_test = np.mean([len(fold.test_indices) for fold in run.payload.outer_folds])
            half = stats.t.ppf(0.975, scores.size - 1) * math.sqrt(
                (1 / scores.size + n_test / n_train) * scores.var(ddof=1))
            summary = row[side]
            assert summary["n"] == 6 and summary["n_missing"] == 0
            assert summary["mean"] == pytest.approx(scores.mean(), abs=1e-12)
            assert summary["sd"] == pytest.approx(scores.std(ddof=1), abs=1e-12)
            assert (summary["ci_low"], summary["ci_high"]) == pytest.approx(
                (scores.mean() - half, scores.mean() + half), abs=1e-12)
    page = client.get("/compare", params={"x": x.uuid, "y": z.uuid, "metric": "accuracy"}).text
    assert "Not paired" in page and body["reason"] in page
    assert 'data-figure="across-intervals"' in page and 'data-figure="across-differences"' not in page


def test_different_rows_or_repeats_say_so(client, stored):
    x = stored["x"]
    rows = client.get("/api/compare", params={"x": x.uuid, "y": stored["other_rows"].uuid}).json()
    assert rows["paired"] is False
    assert rows["reason"].startswith("x has 190 rows and y has 143")
    repeats = client.get("/api/compare", params={"x": x.uuid, "y": stored["one_repeat"].uuid}).json()
    assert repeats["paired"] is False
    assert "x has 2 repeat(s) × 3 outer folds and y has 1 × 3" in repeats["reason"]
    summaries = {row["candidate"]: row for row in repeats["summaries"]}
    assert summaries["bayes"]["y"] is None and summaries["bayes"]["x"]["n"] == 6


def test_the_metric_must_exist_in_both(client, stored):
    x, w = stored["x"], stored["other_rows"]
    assert client.get("/api/compare", params={"x": x.uuid, "y": w.uuid}).json()["metric"] == "roc_auc"
    response = client.get("/api/compare", params={"x": x.uuid, "y": w.uuid, "metric": "accuracy"})
    assert response.status_code == 422
    detail = message(response)
    assert "'accuracy'" in detail and "x recorded roc_auc, accuracy" in detail and "y recorded roc_auc)" in detail
    assert "[" not in detail  # names, not a Python list
    assert client.get("/api/compare", params={"x": x.uuid, "y": w.uuid, "rope": -1}).status_code == 422
    missing = "00000000-0000-4000-8000-000000000000"
    assert client.get("/api/compare", params={"x": x.uuid, "y": missing}).status_code == 404
    assert client.get("/api/compare", params={"x": x.uuid}).status_code == 422


def test_page_lists_stored_assessments_and_keeps_the_choice(client, stored):
    x, y = stored["x"], stored["y"]
    page = client.get("/compare", params={"x": x.uuid, "y": y.uuid, "metric": "accuracy", "rope": 0.02}).text
    form = page.split('id="compare-form"')[1].split("</form>")[0]
    first, second = form.split('name="y"')
    assert first.count("<option ") == len(stored) and f'value="{x.uuid}" selected' in first
    assert f'value="{y.uuid}" selected' in second.split("</select>")[0]
    assert '<option value="accuracy" selected>' in form and 'name="rope" value="0.02"' in form
    assert "Paired: the outer folds match" in page
    assert 'data-figure="across-differences"' in page and 'data-figure="across-intervals"' in page
    query = {"x": x.uuid, "y": y.uuid, "metric": "accuracy", "rope": 0.02}
    body = client.get("/api/compare", params=query).json()
    for comparison in body["comparisons"]:
        assert comparison["result"]["verdict"] in page
    empty = client.get("/compare").text
    assert "Choose two assessments" in empty and 'id="compare-form"' in empty


def _recorded(name, shift, families):
    """Hand-recorded scores on the same 3 outer folds, made up for this check: 'dead' never scores, 'lone' scores
    on outer fold 0 only."""
    recorder = foldwise.Recorder(name, task="classification", metrics=["accuracy"], n_samples=30)
    for fold in range(3):
        recorder.outer_fold(0, fold, n_train=20, test=np.arange(fold * 10, fold * 10 + 10))
        for family in families:
            for inner_fold in range(2):
                recorder.inner(0, fold, inner_fold, family=family, params={},
                               scores={"accuracy": 0.6 + 0.01 * inner_fold + 0.02 * fold})
            scored = family != "dead" and (family != "lone" or fold == 0)
            recorder.outer(0, fold, family=family, params={}, error=None if scored else "made up",
                           scores={"accuracy": 0.55 + shift - 0.01 * fold if scored else None})
    return recorder.finish()


def test_a_candidate_with_no_score_or_one_score_is_summarised_with_nulls_and_counts(client):
    x, y = _recorded("x", 0.0, ["a", "dead", "lone"]), _recorded("y", 0.02, ["a", "lone"])
    for assessment in (x, y):
        response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                               headers={"content-type": "application/json"})
        assert response.status_code == 201
    body = client.get("/api/compare", params={"x": x.uuid, "y": y.uuid}).json()
    rows = {row["candidate"]: row for row in body["summaries"]}
    assert rows["dead"]["y"] is None
    assert rows["dead"]["x"] == {"n": 0, "n_missing": 3, "mean": None, "sd": None, "ci_low": None, "ci_high": None}
    # One score: its mean is that score; no sd and no interval (a t interval needs two), null in JSON.
    assert rows["lone"]["x"] == {"n": 1, "n_missing": 2, "mean": 0.55, "sd": None, "ci_low": None, "ci_high": None}
    page = client.get("/compare", params={"x": x.uuid, "y": y.uuid}).text
    table = page[page.index('id="summary-table"'):]
    lone = table[table.index("<td>lone</td>"):]
    lone = lone[:lone.index("</tr>")]
    assert "– to –" not in lone and "nan" not in lone and "0.550" in lone
