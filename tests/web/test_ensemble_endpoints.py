"""The ensemble endpoints and pages through FastAPI's TestClient, on real nested CVs and a real SQLite file.

(Named apart from tests/stats/test_ensembles.py: the test folders are not packages, so two test
modules may not share a file name.)

Reference: scikit-learn's VotingClassifier(voting="soft") / VotingRegressor, refit by the test on each
outer training set of the same splitter and scored with sklearn.metrics.get_scorer on the outer test
set; scipy.stats.t for the corrected resampled t-test (Nadeau and Bengio, 2003). Data: scikit-learn's
bundled breast cancer and diabetes sets.
"""

from __future__ import annotations

import math
from csv import reader
from io import StringIO
from uuid import UUID

import numpy as np
import pytest
from refusals import message as said  # tests/web/refusals.py: pytest puts this folder on sys.path
from scipy import stats
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.ensemble import VotingClassifier, VotingRegressor
from sklearn.linear_model import LogisticRegression, Ridge, RidgeClassifier
from sklearn.metrics import get_scorer
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

import foldwise

OUTER_CLASSIFY = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
OUTER_REGRESS = RepeatedKFold(n_splits=3, n_repeats=2, random_state=0)
CLASSIFY_SPACE = {
    "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                 {"logisticregression__C": [0.05, 1.0]}),
    "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 4]}),
    "knn": (make_pipeline(StandardScaler(), KNeighborsClassifier()),
            {"kneighborsclassifier__n_neighbors": [5, 15]}),
}
REGRESS_SPACE = {"ridge": (Ridge(), {"alpha": [0.1, 10.0]}),
                 "tree": (DecisionTreeRegressor(random_state=0), {"max_depth": [2, 3]})}


@pytest.fixture(scope="module")
def breast_cancer():
    X, y = load_breast_cancer(return_X_y=True)
    return X[::2], y[::2]


@pytest.fixture(scope="module")
def classified(breast_cancer):
    X, y = breast_cancer
    return foldwise.nested_cv(CLASSIFY_SPACE, X, y, outer=OUTER_CLASSIFY, inner=3,
                              scoring=["roc_auc", "accuracy"], n_jobs=1, progress=False,
                              name="breast cancer, three families")


@pytest.fixture(scope="module")
def regressed():
    X, y = load_diabetes(return_X_y=True)
    return foldwise.nested_cv(REGRESS_SPACE, X, y, outer=OUTER_REGRESS, inner=3,
                              scoring=["r2", "neg_mean_absolute_error"], n_jobs=1, progress=False,
                              name="diabetes")


def push(client, assessment) -> str:
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201
    return assessment.uuid


def config_ids(client, uuid) -> dict[str, dict]:
    return {c["id"]: c for c in client.get(f"/api/assessments/{uuid}").json()["configurations"]}


def preview(client, uuid, members, **extra):
    return client.post(f"/api/assessments/{uuid}/ensembles/preview", json={"members": members, **extra})


def reference_scores(space, members, configs, X, y, outer, metric, combiner):
    """Per outer fold, in (repeat, outer fold) order: the scikit-learn voting ensemble of the members."""
    named = [(f"m{i}", clone(space[configs[m]["family"]][0]).set_params(**configs[m]["params"]))
             for i, m in enumerate(members)]
    scores = []
    for train, test in outer.split(X, y):
        fitted = combiner(named).fit(X[train], y[train])
        scores.append(get_scorer(metric)(fitted, X[test], y[test]))
    return scores


def test_preview_equals_a_soft_voting_classifier_refit_on_each_outer_training_set(client, classified,
                                                                                  breast_cancer):
    X, y = breast_cancer
    uuid = push(client, classified)
    configs = config_ids(client, uuid)
    members = ['logistic:{"logisticregression__C":1.0}', 'tree:{"max_depth":4}',
               'knn:{"kneighborsclassifier__n_neighbors":15}']
    for metric in ("roc_auc", "accuracy"):
        body = preview(client, uuid, members, metric=metric).json()
        assert body["voting"] == "soft" and body["metric"] == metric
        folds = [(f["repeat"], f["outer_fold"]) for f in body["fold_scores"]]
        assert folds == [(r, o) for r in (0, 1) for o in (0, 1, 2)]
        expected = reference_scores(CLASSIFY_SPACE, members, configs, X, y, OUTER_CLASSIFY, metric,
                                    lambda named: VotingClassifier(named, voting="soft"))
        np.testing.assert_allclose([f["score"] for f in body["fold_scores"]], expected, rtol=0, atol=1e-9)
        assert body["mean"] == pytest.approx(np.mean(expected), abs=1e-12)
        assert body["sd"] == pytest.approx(np.std(expected, ddof=1), abs=1e-12)
    summary = {m["metric"]: m for m in body["metrics"]}
    assert set(summary) == {"roc_auc", "accuracy"} and all(m["available"] for m in summary.values())


def test_preview_equals_a_voting_regressor_refit_on_each_outer_training_set(client, regressed):
    X, y = load_diabetes(return_X_y=True)
    uuid = push(client, regressed)
    configs = config_ids(client, uuid)
    members = ['ridge:{"alpha":10.0}', 'tree:{"max_depth":3}']
    for metric in ("r2", "neg_mean_absolute_error"):
        body = preview(client, uuid, members, metric=metric).json()
        assert body["voting"] == "mean"
        expected = reference_scores(REGRESS_SPACE, members, configs, X, y, OUTER_REGRESS, metric,
                                    VotingRegressor)
        np.testing.assert_allclose([f["score"] for f in body["fold_scores"]], expected, rtol=0, atol=1e-9)


def test_preview_sits_beside_the_selection_procedure_and_the_best_family(client, classified):
    uuid = push(client, classified)
    members = ['logistic:{"logisticregression__C":0.05}', 'knn:{"kneighborsclassifier__n_neighbors":15}']
    body = preview(client, uuid, members, rope=0.02).json()
    winners = client.get(f"/api/assessments/{uuid}/winners").json()
    selection = [w["outer_score"] for w in sorted(winners, key=lambda w: (w["repeat"], w["outer_fold"]))]
    assert [f["score"] for f in body["selection"]["fold_scores"]] == selection
    family_rows = client.get(f"/api/assessments/{uuid}/winners", params={"level": "family"}).json()
    means = {f: np.mean([r["outer_score"] for r in family_rows if r["family"] == f]) for f in CLASSIFY_SPACE}
    assert body["best_family"]["family"] == max(means, key=means.get)
    # The corrected resampled t-test of Nadeau and Bengio (2003), written out here with scipy.stats.t.
    d = np.array([f["score"] for f in body["fold_scores"]]) - np.array(selection)
    n_train = np.mean([s.n_train for s in _sizes(classified)])
    n_test = np.mean([s.n_test for s in _sizes(classified)])
    t = d.mean() / math.sqrt((1 / len(d) + n_test / n_train) * d.var(ddof=1))
    assert body["comparison"]["corrected_t"] == pytest.approx(t, rel=1e-9)
    assert body["comparison"]["corrected_p"] == pytest.approx(2 * stats.t.sf(abs(t), len(d) - 1), rel=1e-9)
    assert body["rope"] == 0.02
    assert [f["diff"] for f in body["folds"]] == pytest.approx(d.tolist(), abs=1e-12)
    assert body["rule"] == "hand-picked"
    assert "optimistic for members picked by hand" in body["caution"]


def _sizes(assessment):
    frame = assessment.outer_scores.drop_duplicates(["repeat", "outer_fold"])
    return list(frame[["n_train", "n_test"]].itertuples())


def test_rules_fixed_in_advance_are_named_and_each_member_says_how_often_it_won(client, classified):
    uuid = push(client, classified)
    overall = sorted(set(classified.winners["config"]))
    body = preview(client, uuid, overall).json()
    assert body["rule"] == "all overall fold winners"
    for member in body["member_details"]:
        assert member["n_overall_wins"] == int((classified.winners["config"] == member["config"]).sum())
        assert member["n_family_wins"] == int((classified.family_winners["config"] == member["config"]).sum())
    trees = sorted(set(classified.family_winners.query("family == 'tree'")["config"]))
    assert preview(client, uuid, trees).json()["rule"] == "all fold winners of tree"


def test_bad_members_and_metrics_get_a_422_naming_them(client, classified):
    uuid = push(client, classified)
    member = 'tree:{"max_depth":2}'
    cases = [({"members": [member, "tree:{}", "svm:{}"]}, "['tree:{}', 'svm:{}'] are not configurations"),
             ({"members": [member, member]}, "names ['tree:{\"max_depth\":2}'] more than once"),
             ({"members": []}, "members is empty"),
             ({"members": [member], "metric": "f1"}, "metric 'f1' was not recorded")]
    for body, message in cases:
        response = client.post(f"/api/assessments/{uuid}/ensembles/preview", json=body)
        assert response.status_code == 422
        assert message in said(response)
    misspelt = client.post(f"/api/assessments/{uuid}/ensembles/preview", json={"member": [member]})
    assert misspelt.status_code == 422
    unknown = "00000000-0000-4000-8000-000000000000"
    assert preview(client, unknown, [member]).status_code == 404


def test_a_member_without_stored_predictions_gets_a_422(client, breast_cancer):
    X, y = breast_cancer
    bare = foldwise.nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}, X, y,
                              outer=2, inner=2, n_jobs=1, progress=False, keep_predictions=False)
    uuid = push(client, bare)
    response = preview(client, uuid, ['tree:{"max_depth":1}'])
    assert response.status_code == 422
    assert "['tree:{\"max_depth\":1}'] have no stored outer-test predictions" in said(response)


def test_hard_voting_is_said_and_a_probability_metric_falls_back_or_is_refused(client, breast_cancer):
    X, y = breast_cancer
    space = {"ridge": (make_pipeline(StandardScaler(), RidgeClassifier()), {}),
             "tree": (DecisionTreeClassifier(max_depth=2, random_state=0), {})}
    mixed = foldwise.nested_cv(space, X, y, outer=3, inner=2, scoring=["roc_auc", "accuracy"], n_jobs=1,
                               progress=False)
    uuid = push(client, mixed)
    members = ["ridge:{}", "tree:{}"]
    body = preview(client, uuid, members).json()
    assert body["voting"] == "hard" and "majority" in body["voting_text"]
    assert body["metric"] == "accuracy" and "so the estimate is on accuracy" in body["metric_note"]
    refused = preview(client, uuid, members, metric="roc_auc")
    assert refused.status_code == 422 and "choose one of ['accuracy']" in said(refused)


def test_save_list_get_csv_and_delete(client, classified):
    uuid = push(client, classified)
    members = ['logistic:{"logisticregression__C":1.0}', 'tree:{"max_depth":2}']
    response = client.post(f"/api/assessments/{uuid}/ensembles",
                           json={"name": "two families", "note": "a hunch", "members": members})
    assert response.status_code == 201
    saved = response.json()
    assert UUID(saved["id"]).version == 4
    assert saved["members"] == members and saved["voting"] == "soft" and saved["metric"] == "roc_auc"
    assert saved["estimate_mean"] == preview(client, uuid, members).json()["mean"]
    one = client.get(f"/api/ensembles/{saved['id']}").json()
    assert one["estimate"]["fold_scores"] == preview(client, uuid, members).json()["fold_scores"]
    assert one["models_kept"] is False
    assert [e["id"] for e in client.get(f"/api/assessments/{uuid}/ensembles").json()] == [saved["id"]]
    csv = client.get(f"/api/assessments/{uuid}/ensembles", params={"format": "csv"})
    assert csv.headers["content-type"].startswith("text/csv")
    lines = list(reader(StringIO(csv.text, newline="")))  # Python's csv module as the reader
    assert lines[0][:3] == ["ensemble_id", "ensemble", "note"] and len(lines) == 1 + len(members)
    assert all(line[:3] == [saved["id"], "two families", "a hunch"] for line in lines[1:])
    assert [a["n_ensembles"] for a in client.get("/api/assessments").json()] == [1]
    page = client.get(f"/assessments/{uuid}").text
    assert "two families" in page and f"/ensembles/{saved['id']}" in page and "ensembles?format=csv" in page
    assert client.delete(f"/api/ensembles/{saved['id']}").status_code == 204
    assert client.get(f"/api/ensembles/{saved['id']}").status_code == 404
    assert client.delete(f"/api/ensembles/{saved['id']}").status_code == 404


def test_bad_saves_get_a_422_and_store_nothing(client, classified):
    uuid = push(client, classified)
    member = 'tree:{"max_depth":2}'
    for body in ({"name": "", "members": [member]}, {"name": "x", "members": [member, member]},
                 {"name": "x", "members": ["nope"]}, {"name": "x"}):
        assert client.post(f"/api/assessments/{uuid}/ensembles", json=body).status_code == 422
    assert client.get(f"/api/assessments/{uuid}/ensembles").json() == []


def test_saved_ensembles_survive_a_restart(db_path, client, classified, open_client):
    uuid = push(client, classified)
    saved = client.post(f"/api/assessments/{uuid}/ensembles",
                        json={"name": "kept", "members": ['tree:{"max_depth":4}']}).json()
    client.app.state.engine.dispose()
    with open_client(f"sqlite:///{db_path}") as again:
        assert again.get(f"/api/ensembles/{saved['id']}").json()["name"] == "kept"
        assert "kept" in again.get(f"/assessments/{uuid}").text
        assert again.get("/api/assessments").json()[0]["n_ensembles"] == 1


def test_spec_download_reads_as_plain_json(client, classified):
    uuid = push(client, classified)
    members = ['knn:{"kneighborsclassifier__n_neighbors":5}', 'tree:{"max_depth":2}']
    saved = client.post(f"/api/assessments/{uuid}/ensembles", json={"name": "s", "members": members}).json()
    response = client.get(saved["spec_url"])
    assert "attachment" in response.headers["content-disposition"]
    spec = response.json()
    assert spec["voting"] == "soft" and spec["combiner"] == "sklearn.ensemble.VotingClassifier"
    assert [(m["family"], m["config"], m["estimator_class"]) for m in spec["members"]] == [
        ("knn", members[0], "sklearn.pipeline.Pipeline"),
        ("tree", members[1], "sklearn.tree._classes.DecisionTreeClassifier")]
    assert spec["members"][0]["params"] == {"kneighborsclassifier__n_neighbors": 5}
    assert "optimistic" in spec["estimate"]["caution"]


def test_model_download_without_kept_models_says_how_to_get_one(client, classified):
    uuid = push(client, classified)
    saved = client.post(f"/api/assessments/{uuid}/ensembles",
                        json={"name": "m", "members": ['tree:{"max_depth":2}']})
    response = client.get(saved.json()["model_url"])
    assert response.status_code == 409 and "keep_models=True" in said(response)


def test_the_ensemble_page_shows_the_estimate_with_its_caution_beside_it(client, classified):
    uuid = push(client, classified)
    members = sorted(set(classified.winners["config"]))
    saved = client.post(f"/api/assessments/{uuid}/ensembles", json={"name": "overall", "note": "rule",
                                                                    "members": members}).json()
    html = client.get(f"/ensembles/{saved['id']}").text
    estimate = html[html.index('id="ensemble-estimate"'):]
    assert f"{saved['estimate_mean']:.3f}" in estimate[:200]
    caution = estimate.index("ensemble-caution")
    assert caution < 400 and "honest for a rule fixed in advance" in estimate[caution:caution + 300]
    assert "all overall fold winners" in html and "/vendor/plotly.min.js" in html
    assert client.get("/ensembles/00000000-0000-4000-8000-000000000000").status_code == 404
    assert client.get("/ensembles/not-an-id").status_code == 404


def _one_fold_predicted():
    """Hand-recorded labels, made up for this check: the member 'left' has a prediction on outer fold 0 only,
    so its ensemble is scored on one of two outer folds; hard voting cannot give roc_auc."""
    recorder = foldwise.Recorder("one scored fold", task="classification", metrics=["roc_auc", "accuracy"],
                                 n_samples=20, classes=[0, 1], prediction_kind="predict")
    y_true = np.array([0, 1, 0, 1, 1, 0, 1, 0, 0, 1])
    for fold in range(2):
        recorder.outer_fold(0, fold, n_train=10, test=np.arange(fold * 10, fold * 10 + 10), y_true=y_true)
        for family, score, predictions in (("left", 0.8, y_true if fold == 0 else None), ("right", 0.7, 1 - y_true)):
            for inner_fold in range(2):
                recorder.inner(0, fold, inner_fold, family=family, params={},
                               scores={"roc_auc": score, "accuracy": score})
            recorder.outer(0, fold, family=family, params={}, scores={"roc_auc": score, "accuracy": score},
                           predictions=predictions)
    return recorder.finish(), y_true


def test_an_ensemble_scored_on_one_outer_fold_shows_no_spread_and_says_what_is_missing(client):
    assessment, y_true = _one_fold_predicted()
    uuid = push(client, assessment)
    body = preview(client, uuid, ["left:{}"]).json()
    # Reference: sklearn's accuracy scorer on the one fold with a prediction (the labels themselves).
    assert body["mean"] == get_scorer("accuracy")._score_func(y_true, y_true) == 1.0
    assert (body["sd"], body["n"], body["n_missing"]) == (None, 1, 1)  # one score: no sd, null in JSON
    assert [fold["score"] for fold in body["fold_scores"]] == [1.0, None]
    assert [(fold["ensemble"], fold["diff"]) for fold in body["folds"]][1] == (None, None)
    assert body["comparison"] is None and "needs at least 2 paired outer folds" in body["comparison_note"]
    assert body["metrics"][1] == {"metric": "roc_auc", "available": False, "reason": body["metrics"][1]["reason"]}
    assert "needs class probabilities" in body["metrics"][1]["reason"]
    saved = client.post(f"/api/assessments/{uuid}/ensembles", json={"name": "left alone", "members": ["left:{}"]})
    assert saved.status_code == 201 and saved.json()["estimate_sd"] is None
    html = client.get(f"/ensembles/{saved.json()['id']}").text
    estimate = html[html.index('id="ensemble-estimate"'):]
    assert estimate[:estimate.index("</p>")].endswith("1.000")  # no "± nan" after the mean
    assert "needs class probabilities" in html and "nan" not in estimate[:estimate.index("</p>")]
