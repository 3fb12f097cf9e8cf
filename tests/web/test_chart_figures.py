"""The figures behind the score distributions and the parameter-stability strips, read from the page's JSON
and checked against the runner's own frames (the stored scores and winners), plus a real-browser drawing."""

from __future__ import annotations

import json
import re
from collections import defaultdict

import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold, StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

import foldwise
from foldwise.client import save
from foldwise.web.charts.distributions import CHROME, ROW_HEIGHT

N_REPEATS, N_OUTER = 2, 3
DRAWN = ("() => { const charts = document.querySelectorAll('.chart');"
         " return charts.length > 0 && [...charts].every(c => c.dataset.drawn === 'true'); }")


@pytest.fixture(scope="module")
def repeated():
    """Two repeats of 3 outer folds (scikit-learn's RepeatedStratifiedKFold), three families, a two-parameter grid."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3], "min_samples_leaf": [1, 20]}),
             "stump": (DecisionTreeClassifier(max_depth=1, random_state=0), {})}
    return foldwise.nested_cv(space, X[::3], y[::3], scoring=["roc_auc"], n_jobs=1, progress=False,
                              outer=RepeatedStratifiedKFold(n_splits=N_OUTER, n_repeats=N_REPEATS, random_state=3),
                              inner=StratifiedKFold(3, shuffle=True, random_state=4), name="repeated, three families")


@pytest.fixture
def pushed(client, repeated):
    response = client.post("/api/assessments", content=repeated.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text
    return repeated.uuid


def _figure(page: str, chart_id: str) -> dict:
    found = re.search(rf'<script type="application/json" id="{chart_id}">(.*?)</script>', page, re.S)
    return json.loads(found.group(1))


def _role(figure: dict, role: str) -> list[dict]:
    return [trace for trace in figure["data"] if trace.get("meta", {}).get("role") == role]


@pytest.mark.parametrize("by", ["family", "config"])
def test_distributions_are_horizontal_boxes_with_means_fold_lines_and_shapes(client, repeated, pushed, by):
    body = client.get(f"/api/assessments/{pushed}/distributions", params={"by": by}).json()
    groups = body["config_groups"] if by == "config" else body["family_groups"]
    figure = _figure(client.get(f"/assessments/{pushed}/distributions", params={"by": by}).text, "distributions")

    boxes = _role(figure, "box")
    assert len(boxes) == len(groups)
    assert all(box["orientation"] == "h" and box["boxmean"] is True for box in boxes)  # the mean marked
    # Sized to its rows, one row per box, first group on top.
    assert figure["layout"]["height"] == CHROME + ROW_HEIGHT * len(groups)
    assert figure["layout"]["yaxis"]["tickvals"] == list(range(len(groups)))
    for box, group in zip(boxes, groups, strict=True):
        assert sorted(box["x"]) == pytest.approx(sorted(p["score"] for p in group["points"]))

    # One thin line per outer fold, through that fold's score in every row: the pairing the paired tests use.
    # All of them in one trace: fold after fold, one point per row, then None to end the line.
    [lines] = _role(figure, "fold")
    assert lines["mode"] == "lines" and lines["connectgaps"] is False
    folds = [tuple(fold) for fold in lines["meta"]["folds"]]
    assert sorted(folds) == [(repeat, fold) for repeat in range(N_REPEATS) for fold in range(N_OUTER)]
    stride = len(groups) + 1
    assert len(lines["x"]) == len(lines["y"]) == stride * len(folds)
    for k, (repeat, fold) in enumerate(folds):
        xs, ys = lines["x"][k * stride:(k + 1) * stride], lines["y"][k * stride:(k + 1) * stride]
        expected = [next(p["score"] for p in group["points"] if (p["repeat"], p["outer_fold"]) == (repeat, fold))
                    for group in groups]
        assert xs[-1] is None and ys[-1] is None
        assert xs[:-1] == pytest.approx(expected)
        assert [round(y) for y in ys[:-1]] == list(range(len(groups)))

    # The family colours kept, and a marker shape per family so nothing rests on colour alone.
    points = _role(figure, "points")
    assert {trace["name"] for trace in points} == {group["family"] for group in groups}
    symbols = [trace["marker"]["symbol"] for trace in points]
    assert len(set(symbols)) == len(symbols) == len(body["families"])
    for trace in points:
        assert trace["marker"]["color"] == body["colours"][trace["name"]]


def test_stability_is_one_strip_per_parameter_across_the_outer_folds(client, repeated, pushed):
    page = client.get(f"/assessments/{pushed}/fold-winners").text
    body = client.get(f"/api/assessments/{pushed}/fold-winners").json()
    stored = client.get(f"/api/assessments/{pushed}/winners", params={"level": "family"}).json()
    chosen = defaultdict(dict)  # family -> (repeat, outer fold) -> params, from the stored winners
    for row in stored:
        chosen[row["family"]][(row["repeat"], row["outer_fold"])] = row["params"]
    grids = defaultdict(set)
    for config in repeated.payload.configurations:
        grids[config.family] |= set(config.params)
    for position, family in enumerate(body["stability"], start=1):
        name = family["family"]
        if not grids[name]:
            assert f'id="stability-{position}"' not in page  # nothing to choose, nothing drawn
            continue
        strip = _figure(page, f"stability-{position}")["data"][0]
        parameters = [p["parameter"] for p in family["parameters"]]
        assert sorted(parameters) == sorted(grids[name])
        assert strip["type"] == "heatmap" and len(strip["z"]) == len(strip["text"]) == len(parameters)
        assert strip["x"] == [f"r{r}·f{f}" for r in range(N_REPEATS) for f in range(N_OUTER)]
        for row, parameter in zip(strip["text"], parameters, strict=True):
            assert len(row) == N_REPEATS * N_OUTER
            assert row == [str(chosen[name][(r, f)][parameter]) for r in range(N_REPEATS) for f in range(N_OUTER)]
        assert [fold["params"] for fold in family["by_fold"]] == [
            chosen[name][(r, f)] for r in range(N_REPEATS) for f in range(N_OUTER)]


@pytest.mark.browser
def test_the_new_charts_draw_without_console_errors(browser, live_server, repeated):
    save(repeated.payload, str(live_server.db_path))
    base = f"{live_server.url}/assessments/{repeated.uuid}"
    for url in (f"{base}/distributions", f"{base}/distributions?by=config", f"{base}/fold-winners",
                f"{base}/optimism"):
        page, problems = open_watched(browser, url)
        page.wait_for_function(DRAWN)
        assert page.locator(".chart .main-svg").count() >= 1
        assert problems == [], url
        page.close()
    # The boxes are drawn lying down, one row per configuration.
    page, problems = open_watched(browser, f"{base}/distributions?by=config")
    page.wait_for_function(DRAWN)
    assert page.locator("#distributions-plot g.trace.boxes path.box").count() == len(repeated.payload.configurations)
    assert problems == []
    page.close()
