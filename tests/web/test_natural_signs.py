"""A loss scikit-learn negates reads as itself on every page and chart, while the API keeps scikit-learn's sign.

The reference numbers come from scikit-learn itself: each outer fold's winner is refit here, in a plain
loop over the outer splitter, and scored with ``sklearn.metrics.root_mean_squared_error`` on the outer
test rows.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.datasets import load_diabetes
from sklearn.linear_model import Ridge
from sklearn.metrics import get_scorer, get_scorer_names, mean_squared_error, root_mean_squared_error
from sklearn.model_selection import KFold
from sklearn.tree import DecisionTreeRegressor

import foldwise
from foldwise.web.metric_display import metric_display

METRIC = "neg_root_mean_squared_error"
OUTER = KFold(n_splits=3, shuffle=True, random_state=11)
SPACE = {"ridge": (Ridge(), {"alpha": [0.1, 10.0]}),
         "tree": (DecisionTreeRegressor(random_state=0), {"max_depth": [2, 3]})}
PM = '<abbr class="pm" title="± one standard deviation over the outer folds">±</abbr>'


@pytest.fixture(scope="module")
def assay():
    """A real nested CV on scikit-learn's bundled diabetes data, RMSE selecting the fold winners."""
    X, y = load_diabetes(return_X_y=True)
    X, y = X[::2], y[::2]
    assessment = foldwise.nested_cv(SPACE, X, y, outer=OUTER, inner=KFold(3, shuffle=True, random_state=12),
                                    scoring=[METRIC, "neg_mean_squared_error", "r2"], n_jobs=1, progress=False,
                                    name="diabetes, RMSE", dataset="diabetes (scikit-learn bundled)")
    return assessment, X, y


@pytest.fixture
def pushed(client, assay):
    assessment = assay[0]
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text
    return assessment.uuid


def _reference(assay, metric=root_mean_squared_error) -> dict[int, float]:
    """Per outer fold, the overall fold winner refit on the outer training rows and scored by scikit-learn."""
    assessment, X, y = assay
    winners = assessment.winners.set_index("outer_fold")
    losses = {}
    for fold, (train, test) in enumerate(OUTER.split(X)):
        winner = winners.loc[fold]
        model = clone(SPACE[winner["family"]][0]).set_params(**winner["params"]).fit(X[train], y[train])
        losses[fold] = float(metric(y[test], model.predict(X[test])))
    return losses


def _figure(page: str, chart_id: str) -> dict:
    found = re.search(rf'<script type="application/json" id="{chart_id}">(.*?)</script>', page, re.S)
    return json.loads(found.group(1))


def test_every_negated_scikit_learn_scorer_reads_as_its_loss():
    # scikit-learn's own record of which scorers negate: a scorer's sign is -1 exactly for the neg_* names.
    for name in get_scorer_names():
        display = metric_display(name)
        assert display.negated == (get_scorer(name)._sign == -1), name
        assert not display.name.startswith("neg_") and display.direction == (
            "lower is better" if display.negated else "higher is better")
    rmse = metric_display(METRIC)
    assert (rmse.name, rmse.label, rmse.value(-7.865), rmse.span(-8.0, -7.0)) == (
        "RMSE", "RMSE (lower is better)", 7.865, (7.0, 8.0))
    assert rmse.value(None) is None and np.isnan(rmse.value(float("nan")))
    assert rmse.difference("a", "b") == "RMSE(b) − RMSE(a)"  # a − b on the scores: positive still favours a
    roc = metric_display("roc_auc")
    assert (roc.value(0.9), roc.span(0.8, 0.9), roc.difference("a", "b")) == (0.9, (0.8, 0.9), "a − b")


def test_the_api_keeps_scikit_learns_sign_and_says_so(client, assay, pushed):
    losses = _reference(assay)
    body = client.get(f"/api/assessments/{pushed}").json()
    assert body["metric"] == METRIC
    assert body["nested_estimate"]["mean"] == pytest.approx(-np.mean(list(losses.values())), rel=1e-9)
    winners = {row["outer_fold"]: row for row in client.get(f"/api/assessments/{pushed}/winners").json()}
    for fold, loss in losses.items():
        assert winners[fold]["outer_score"] == pytest.approx(-loss, rel=1e-9)
    listed = client.get("/api/assessments").json()[0]
    assert listed["estimate_mean"] < 0 and listed["estimate_low"] < listed["estimate_high"] < 0
    distributions = client.get(f"/api/assessments/{pushed}/distributions").json()
    assert all(group["summary"]["mean"] < 0 for group in distributions["family_groups"])
    csv = client.get(f"/api/assessments/{pushed}/scores", params={"level": "outer", "format": "csv"})
    assert "neg_* is the negated loss" in csv.headers["x-foldwise-score-sign"]
    schema = client.get("/api/openapi.json").json()
    components = schema["components"]["schemas"]
    assert "negated loss" in components["WinnerRow"]["properties"]["outer_score"]["description"]
    assert "negated" in components["Distributions"]["properties"]["metric"]["description"]
    assert "scikit-learn's orientation" in schema["info"]["description"]


def test_every_page_shows_rmse_positive_under_its_own_name(client, assay, pushed):
    losses = _reference(assay)
    rmse = float(np.mean(list(losses.values())))
    body = client.get(f"/api/assessments/{pushed}").json()
    listed = client.get("/api/assessments").json()[0]

    index = client.get("/").text
    assert "RMSE" in index and "lower is better" in index and PM in index
    assert f"{rmse:.3f}" in index and f"-{rmse:.3f}" not in index
    # The interval's ends swap: the loss's low end is the score's high end.
    assert f"{-listed['estimate_high']:.3f} to {-listed['estimate_low']:.3f}" in index

    detail = client.get(f"/assessments/{pushed}").text
    headline = detail.split('id="headline"')[1].split("</section>")[0]
    assert f'id="nested-estimate">{rmse:.3f}<' in headline and PM in headline
    assert f"nested estimate RMSE {rmse:.3f}" in detail  # what to ship
    winners = detail.split('id="fold-winners"')[1].split("</table>")[0]
    for loss in losses.values():
        assert f"{loss:.3f}" in winners
    assert "outer RMSE − inner mean RMSE" in detail  # optimism in the loss's own terms
    assert "neg_root_mean_squared_error = −RMSE" in detail  # the downloads keep scikit-learn's sign
    families = detail.split('id="family-summary"')[1].split("</table>")[0]
    for row in body["family_summary"]:
        assert f"{-row['mean']:.3f}" in families and f"{-row['min']:.3f}" in families

    pages = {name: client.get(f"/assessments/{pushed}/{name}").text
             for name in ("distributions", "fold-winners", "optimism", "ranking", "compare")}
    for name, page in pages.items():
        assert "RMSE" in page and "lower is better" in page, name
    for name in ("distributions", "fold-winners", "ranking"):  # pages of levels only (no differences)
        assert not re.search(r'class="num">-\d', pages[name]), name
    assert "outer RMSE − inner mean RMSE" in pages["optimism"] and "Points above the dashed" in pages["optimism"]
    for loss in losses.values():
        assert f"outer {loss:.3f}" in pages["fold-winners"]
    ranking = client.get(f"/api/assessments/{pushed}/ranking").json()
    for row in ranking["families"]:
        assert f"{-row['mean']:.3f}" in pages["ranking"]
    paired = client.get(f"/api/assessments/{pushed}/compare").json()
    for fold in paired["folds"]:
        assert f"{-fold['a']:.4f}" in pages["compare"]
    assert "RMSE(b) − RMSE(a)" in pages["compare"]

    report = client.get(f"/assessments/{pushed}/report").text
    assert f"RMSE {rmse:.3f}" in report


def test_charts_draw_the_loss_positive(client, assay, pushed):
    losses = _reference(assay)
    outer = client.get(f"/api/assessments/{pushed}/scores").json()
    winners = {(row["outer_fold"], row["family"]): row["score"] for row in outer
               if row["metric"] == METRIC and row["family_winner"]}
    page = client.get(f"/assessments/{pushed}/distributions").text
    figure = _figure(page, "distributions")
    points = [trace for trace in figure["data"] if trace["meta"]["role"] == "points"]
    drawn = sorted(x for trace in points for x in trace["x"])
    assert drawn == pytest.approx(sorted(-score for score in winners.values()), rel=1e-12)
    assert "RMSE (lower is better)" in figure["layout"]["xaxis"]["title"]["text"]
    boxes = [trace for trace in figure["data"] if trace["meta"]["role"] == "box"]
    assert all(x > 0 for trace in boxes for x in trace["x"])

    optimism = _figure(client.get(f"/assessments/{pushed}/optimism").text, "optimism")
    drawn = sorted(y for trace in optimism["data"][1:] for y in trace["y"])
    assert drawn == pytest.approx(sorted(losses.values()), rel=1e-9)  # scikit-learn's RMSE of each winner

    inner = _figure(client.get(f"/assessments/{pushed}/inner").text, "inner-scores")["data"][0]
    assert all(value > 0 for row in inner["z"] for value in row if value is not None)
    assert inner["reversescale"] is True  # the darker end is still the better one


def test_a_second_negated_metric_is_flipped_on_its_own(client, assay, pushed):
    # MSE, checked against sklearn.metrics.mean_squared_error on the same outer test rows.
    losses = _reference(assay, mean_squared_error)
    body = client.get(f"/api/assessments/{pushed}/winners", params={"metric": "neg_mean_squared_error"}).json()
    for row in body:
        assert row["outer_score"] == pytest.approx(-losses[row["outer_fold"]], rel=1e-9)
    page = client.get(f"/assessments/{pushed}", params={"metric": "neg_mean_squared_error"}).text
    winners = page.split('id="fold-winners"')[1].split("</table>")[0]
    for loss in losses.values():
        assert f"{loss:.3f}" in winners
    assert "MSE (lower is better)" in page
