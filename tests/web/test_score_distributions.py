"""The score distributions page and its JSON, checked against numpy and scipy on the runner's own frames."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold, check_cv
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _figure(page: str, chart_id: str) -> dict:
    found = re.search(rf'<script type="application/json" id="{chart_id}">(.*?)</script>', page, re.S)
    return json.loads(found.group(1))


def _traces(figure: dict, role: str) -> list[dict]:
    """The figure's traces of one role (app/web/charts/distributions.py: "box", "points" or "fold")."""
    return [trace for trace in figure["data"] if trace.get("meta", {}).get("role") == role]


def _expected_summary(scores: np.ndarray, n_train: float, n_test: float) -> dict:
    """Mean, sample sd, the plain Student-t 95% interval as a spread (Student 1908), via scipy.stats.t.interval,
    and the corrected resampled t interval (Nadeau and Bengio, 2003) with scipy.stats.t quantiles."""
    n, mean, sd = scores.size, float(np.mean(scores)), float(np.std(scores, ddof=1))
    low, high = stats.t.interval(0.95, n - 1, loc=mean, scale=sd / np.sqrt(n))
    half = stats.t.ppf(0.975, n - 1) * np.sqrt((1 / n + n_test / n_train) * sd**2)
    return {"n": n, "mean": mean, "sd": sd, "min": float(scores.min()), "max": float(scores.max()),
            "spread_low": low, "spread_high": high, "interval_low": mean - half, "interval_high": mean + half}


def _sizes() -> tuple[float, float]:
    """Mean outer training and test sizes of the small assessment (conftest: every other row of the bundled
    breast-cancer data, outer=3), from scikit-learn's own splitter for a classifier."""
    X, y = load_breast_cancer(return_X_y=True)
    folds = list(check_cv(3, y[::2], classifier=True).split(X[::2], y[::2]))
    return float(np.mean([len(train) for train, _ in folds])), float(np.mean([len(test) for _, test in folds]))


def _assert_summary(served: dict, scores: np.ndarray, n_train: float | None = None,
                    n_test: float | None = None) -> None:
    if n_train is None:
        n_train, n_test = _sizes()
    expected = _expected_summary(scores, n_train, n_test)
    assert served["n"] == expected.pop("n")
    assert served["n_missing"] == 0
    for name, value in expected.items():
        assert served[name] == pytest.approx(value, rel=0, abs=1e-12), name


@pytest.fixture(scope="module")
def winners_only():
    """The same two families, with only each family's winner refit on the outer folds (refit_all=False)."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    return foldwise.nested_cv(space, X[::4], y[::4], outer=3, inner=2, n_jobs=1, progress=False,
                              refit_all=False, name="winners only")


def test_family_estimates_match_numpy_and_the_student_t_interval(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/distributions").json()
    outer = small_assessment.outer_scores
    outer = outer[(outer["metric"] == "roc_auc")]
    means = {}
    for group in body["family_groups"]:
        rows = outer[outer["family_winner"] & (outer["family"] == group["family"])]
        scores = rows["score"].to_numpy(dtype=float)
        _assert_summary(group["summary"], scores)
        assert sorted(point["score"] for point in group["points"]) == sorted(scores.tolist())
        means[group["family"]] = scores.mean()
    # Sorted by mean, best first (the default).
    assert [g["family"] for g in body["family_groups"]] == sorted(means, key=means.get, reverse=True)
    _assert_summary(body["overall"], outer[outer["overall_winner"]]["score"].to_numpy(dtype=float))
    assert body["overall"]["mean"] == pytest.approx(small_assessment.nested_estimate.mean, abs=1e-12)
    assert body["config_groups"] == [] and body["by"] == "family"


def test_any_recorded_metric_and_sorting_by_name(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/distributions",
                      params={"metric": "accuracy", "sort": "name"}).json()
    assert body["metric"] == "accuracy" and body["sort"] == "name"
    assert [g["family"] for g in body["family_groups"]] == ["logistic", "tree"]
    outer = small_assessment.outer_scores
    for group in body["family_groups"]:
        rows = outer[(outer["metric"] == "accuracy") & outer["family_winner"]
                     & (outer["family"] == group["family"])]
        _assert_summary(group["summary"], rows["score"].to_numpy(dtype=float))
    refused = client.get(f"/api/assessments/{small_assessment.uuid}/distributions", params={"metric": "r2"})
    assert refused.status_code == 422 and "roc_auc" in message(refused)


def test_every_configuration_when_every_configuration_was_refit(client, small_assessment):
    _push(client, small_assessment)
    uuid = small_assessment.uuid
    body = client.get(f"/api/assessments/{uuid}/distributions", params={"by": "config"}).json()
    assert body["by"] == "config" and body["message"] == ""
    outer = small_assessment.outer_scores
    outer = outer[outer["metric"] == "roc_auc"]
    configs = [c.id for c in small_assessment.payload.configurations]
    assert sorted(g["config"] for g in body["config_groups"]) == sorted(configs)
    for group in body["config_groups"]:
        scores = outer[outer["config"] == group["config"]]["score"].to_numpy(dtype=float)
        _assert_summary(group["summary"], scores)
    # Grouped by family in the families' order on the page, best mean first within each.
    families = [g["family"] for g in body["family_groups"]]
    seen = [g["family"] for g in body["config_groups"]]
    assert seen == sorted(seen, key=families.index)
    for family in families:
        mine = [g["summary"]["mean"] for g in body["config_groups"] if g["family"] == family]
        assert mine == sorted(mine, reverse=True)
    page = client.get(f"/assessments/{uuid}/distributions", params={"by": "config"}).text
    assert len(_traces(_figure(page, "distributions"), "box")) == len(configs)
    assert '<option value="config" selected>' in page
    assert 'id="config-estimates"' in page


def test_families_filter_repeated_or_comma_separated(client, small_assessment):
    _push(client, small_assessment)
    url = f"/api/assessments/{small_assessment.uuid}/distributions"
    assert client.get(url, params={"families": "tree"}).json()["selected"] == ["tree"]
    assert client.get(url + "?families=tree,logistic").json()["selected"] == ["logistic", "tree"]
    assert client.get(url + "?families=tree&families=logistic").json()["selected"] == ["logistic", "tree"]
    body = client.get(url, params={"families": "tree"}).json()
    assert [g["family"] for g in body["family_groups"]] == ["tree"]
    refused = client.get(url, params={"families": "forest"})
    assert refused.status_code == 422
    assert "forest" in message(refused) and "logistic" in message(refused)


def test_page_shows_the_table_in_family_colours(client, small_assessment):
    _push(client, small_assessment)
    uuid = small_assessment.uuid
    body = client.get(f"/api/assessments/{uuid}/distributions").json()
    page = client.get(f"/assessments/{uuid}/distributions").text
    table = page.split('id="family-estimates"')[1].split("</table>")[0]
    for group in body["family_groups"]:
        summary = group["summary"]
        assert f"{summary['mean']:.3f}" in table
        assert f"{summary['interval_low']:.3f} – {summary['interval_high']:.3f}" in table
        assert f"{summary['spread_low']:.3f} – {summary['spread_high']:.3f}" in table  # no repeats: shown as spread
        assert f"background: {body['colours'][group['family']]}" in table
    assert "t spread" in table and "corrected resampled t" in page
    figure = _figure(page, "distributions")
    assert [trace["line"]["color"] for trace in _traces(figure, "box")] == [
        body["colours"][g["family"]] for g in body["family_groups"]]


def test_without_refit_all_the_configuration_view_says_why(client, winners_only):
    _push(client, winners_only)
    uuid = winners_only.uuid
    body = client.get(f"/api/assessments/{uuid}/distributions", params={"by": "config"}).json()
    assert body["by"] == "family" and body["config_groups"] == []
    assert "refit_all" in body["message"]
    page = client.get(f"/assessments/{uuid}/distributions", params={"by": "config"}).text
    assert 'id="view-message"' in page and 'id="config-estimates"' not in page


def test_a_repeated_design_never_shows_the_plain_t_interval(client):
    """With repeats the plain t over folds covered about half the time (issue 15's table): it is not shown, and
    the corrected interval is, computed here with scipy.stats.t on the repeated folds (Bouckaert and Frank, 2004)."""
    X, y = load_breast_cancer(return_X_y=True)
    X, y = X[::4], y[::4]
    splitter = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    assessment = foldwise.nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]}),
                                     "logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                                                  {"logisticregression__C": [0.1]})},
                                    X, y, outer=splitter, inner=2, n_jobs=1, progress=False, name="repeated")
    _push(client, assessment)
    body = client.get(f"/api/assessments/{assessment.uuid}/distributions").json()
    page = client.get(f"/assessments/{assessment.uuid}/distributions").text
    folds = list(splitter.split(X, y))  # reference: the splitter's own folds, repeat by repeat
    n_train = float(np.mean([len(train) for train, _ in folds]))
    n_test = float(np.mean([len(test) for _, test in folds]))
    outer = assessment.outer_scores
    winners = outer[(outer["metric"] == assessment.selection_metric) & outer["overall_winner"]]["score"]
    winners = winners.to_numpy(dtype=float)
    expected = _expected_summary(winners, n_train, n_test)
    assert body["overall"]["interval_low"] == pytest.approx(expected["interval_low"], abs=1e-12)
    assert body["overall"]["interval_high"] == pytest.approx(expected["interval_high"], abs=1e-12)
    assert body["spread_shown"] is False and body["overall"]["spread_low"] is None
    assert all(group["summary"]["spread_low"] is None for group in body["family_groups"])
    # The page shows the corrected interval beside the nested estimate and never the plain t's numbers.
    row = page.split('id="nested-estimate-row"')[1].split("</tr>")[0]
    assert f"{expected['interval_low']:.3f} – {expected['interval_high']:.3f}" in row
    assert f"{expected['spread_low']:.3f}" not in page and "t spread" not in page
    assert "corrected resampled t" in page
