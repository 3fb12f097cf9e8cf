"""One outer fold's inner scores, fit times and failed fits, against the runner's own frames."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
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


@pytest.fixture(scope="module")
def failing():
    """A tree family whose max_depth=-1 scikit-learn refuses at fit time, in every fold."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.1, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [-1, 2]})}
    with pytest.warns(RuntimeWarning, match="fits failed"):
        return foldwise.nested_cv(space, X[::4], y[::4], outer=3, inner=2, scoring=["roc_auc", "accuracy"],
                                  n_jobs=1, progress=False, name="one failing configuration")


@pytest.mark.parametrize(("repeat", "outer_fold", "metric"), [(0, 0, "roc_auc"), (0, 2, "accuracy")])
def test_heatmap_and_fit_times_match_the_inner_scores(client, small_assessment, repeat, outer_fold, metric):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/inner",
                      params={"repeat": repeat, "outer_fold": outer_fold, "metric": metric}).json()

    def here(frame):
        return frame[(frame["repeat"] == repeat) & (frame["outer_fold"] == outer_fold)
                     & (frame["metric"] == metric)]

    inner, outer = here(small_assessment.inner_scores), here(small_assessment.outer_scores)
    configs = small_assessment.payload.configurations
    assert [row["config"] for row in body["configs"]] == [c.id for c in configs]  # already grouped by family
    assert body["inner_folds"] == [0, 1, 2]
    for row in body["configs"]:
        mine = inner[inner["config"] == row["config"]].sort_values("inner_fold")
        scores = mine["score"].to_numpy()
        assert row["scores"] == pytest.approx(scores.tolist(), abs=0)
        assert row["fit_times"] == pytest.approx(mine["fit_time"].tolist(), abs=0)
        assert row["inner_mean"] == pytest.approx(np.mean(scores), abs=1e-12)
        # Population sd, as scikit-learn's cv_results_["std_test_score"].
        assert row["inner_std"] == pytest.approx(np.std(scores), abs=1e-12)
        assert row["mean_fit_time"] == pytest.approx(mine["fit_time"].mean(), abs=1e-12)
        flags = outer[outer["config"] == row["config"]]
        assert row["outer_score"] == pytest.approx(flags["score"].item(), abs=0)
        assert row["family_winner"] == flags["family_winner"].item()
        assert row["overall_winner"] == flags["overall_winner"].item()
    assert sum(row["overall_winner"] for row in body["configs"]) == 1
    assert sum(row["family_winner"] for row in body["configs"]) == 2


def test_page_draws_both_heatmaps_and_marks_the_winners(client, small_assessment):
    _push(client, small_assessment)
    uuid = small_assessment.uuid
    body = client.get(f"/api/assessments/{uuid}/inner").json()
    page = client.get(f"/assessments/{uuid}/inner").text
    figures = {}
    for chart_id in ("inner-scores", "inner-fit-times"):
        found = re.search(rf'<script type="application/json" id="{chart_id}">(.*?)</script>', page, re.S)
        figures[chart_id] = json.loads(found.group(1))["data"][0]
    assert figures["inner-scores"]["z"] == [row["scores"] for row in body["configs"]]
    assert figures["inner-fit-times"]["z"] == [row["fit_times"] for row in body["configs"]]
    labels = figures["inner-scores"]["y"]
    for label, row in zip(labels, body["configs"], strict=True):
        assert body["colours"][row["family"]] in label
        assert ("★" in label) == row["overall_winner"]
    assert 'id="fold-failures"' in page and "Every fit of this outer fold succeeded." in page


def test_previous_and_next_outer_fold(client, small_assessment):
    _push(client, small_assessment)
    url = f"/api/assessments/{small_assessment.uuid}/inner"
    first = client.get(url).json()
    assert first["previous_fold"] is None and first["next_fold"] == {"repeat": 0, "outer_fold": 1}
    middle = client.get(url, params={"outer_fold": 1}).json()
    assert middle["previous_fold"] == {"repeat": 0, "outer_fold": 0}
    assert middle["next_fold"] == {"repeat": 0, "outer_fold": 2}
    assert client.get(url, params={"outer_fold": 2}).json()["next_fold"] is None
    page = client.get(f"/assessments/{small_assessment.uuid}/inner", params={"outer_fold": 1}).text
    assert 'rel="prev"' in page and 'rel="next"' in page
    assert "repeat=0&amp;outer_fold=2&amp;metric=roc_auc" in page


def test_out_of_range_fold_is_refused_with_the_range(client, small_assessment):
    _push(client, small_assessment)
    refused = client.get(f"/api/assessments/{small_assessment.uuid}/inner", params={"outer_fold": 3})
    assert refused.status_code == 422
    assert "outer_fold 3" in message(refused) and "0..2" in message(refused)
    url = f"/api/assessments/{small_assessment.uuid}/inner"
    assert client.get(url, params={"repeat": -1}).status_code == 422


def test_failed_fits_of_the_fold_are_listed_with_their_messages(client, failing):
    _push(client, failing)
    body = client.get(f"/api/assessments/{failing.uuid}/inner", params={"outer_fold": 1}).json()
    expected = [f for f in failing.payload.failures if (f.repeat, f.outer_fold) == (0, 1)]
    assert len(body["failures"]) == len(expected) == 3  # 2 inner fits and the outer refit
    assert sorted((f["level"], f["inner_fold"]) for f in body["failures"]) == sorted(
        (f.level, f.inner_fold) for f in expected)
    assert all("max_depth" in f["message"] for f in body["failures"])
    bad = next(row for row in body["configs"] if row["params"] == {"max_depth": -1})
    assert bad["scores"] == [None, None] and bad["inner_mean"] is None
    assert not bad["family_winner"] and bad["outer_score"] is None
    page = client.get(f"/assessments/{failing.uuid}/inner", params={"outer_fold": 1}).text
    section = page.split('id="fold-failures"')[1].split("</section>")[0]
    assert "Failed fits in this outer fold (3)" in section
    assert section.count("InvalidParameterError") == 3
