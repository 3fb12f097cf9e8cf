"""The fold winners grid and hyperparameter stability, checked against the selection rule recomputed here."""

from __future__ import annotations

import json
from collections import Counter
from html.parser import HTMLParser

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


class _Hooks(HTMLParser):
    """Every element carrying data-config, with its data-* attributes."""

    def __init__(self):
        super().__init__()
        self.found = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if "data-config" in attrs:
            self.found.append(attrs)


def _hooks(page: str) -> list[dict]:
    parser = _Hooks()
    parser.feed(page.split('id="winner-grid"')[1].split("</table>")[0])
    return parser.found


def _expected_winners(assessment, metric: str):
    """Per outer fold, each family's winner by GridSearchCV's rule and the overall winner, from the frames.

    scikit-learn's ``best_index_`` is the first configuration with the greatest ``mean_test_score``
    (the mean over the inner folds); ``std_test_score`` is the population sd. Recomputed with numpy
    over ``inner_scores``; the overall winner is the best of the family winners (first family on ties).
    """
    configs = assessment.payload.configurations
    selection = assessment.inner_scores[assessment.inner_scores["metric"] == assessment.selection_metric]
    shown = assessment.inner_scores[assessment.inner_scores["metric"] == metric]
    outer = assessment.outer_scores[assessment.outer_scores["metric"] == metric]
    expected = {}
    for (repeat, fold), rows in selection.groupby(["repeat", "outer_fold"]):
        means = {c.id: float(np.mean(rows[rows["config"] == c.id]["score"].to_numpy())) for c in configs}
        families = {}
        for config in configs:  # grid order: the first of equal means wins
            best = families.get(config.family)
            if best is None or means[config.id] > means[best]:
                families[config.family] = config.id
        overall = max(families.values(), key=means.get)  # max keeps the first of equal maxima
        here = shown[(shown["repeat"] == repeat) & (shown["outer_fold"] == fold)]
        scores = {}
        for family, config in families.items():
            inner = here[here["config"] == config]["score"].to_numpy()
            score = outer[(outer["repeat"] == repeat) & (outer["outer_fold"] == fold)
                          & (outer["config"] == config)]["score"].item()
            scores[family] = (config, float(np.mean(inner)), float(np.std(inner)), score)
        expected[(int(repeat), int(fold))] = (overall, scores)
    return expected


@pytest.fixture(scope="module")
def repeated():
    """Two repeats of a 3-fold outer splitter (scikit-learn's RepeatedStratifiedKFold)."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3]})}
    outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    return foldwise.nested_cv(space, X[::4], y[::4], outer=outer, inner=2, scoring=["roc_auc", "accuracy"],
                              n_jobs=1, progress=False, name="two repeats")


@pytest.mark.parametrize("metric", ["roc_auc", "accuracy"])
def test_grid_winners_match_the_selection_rule_recomputed(client, small_assessment, metric):
    _push(client, small_assessment)
    url = f"/api/assessments/{small_assessment.uuid}/fold-winners"
    body = client.get(url, params={"metric": metric}).json()
    expected = _expected_winners(small_assessment, metric)
    assert len(body["grid"]) == 1 and len(body["grid"][0]) == 3 and body["n_folds"] == 3
    for row in body["grid"]:
        for cell in row:
            overall, scores = expected[(cell["repeat"], cell["outer_fold"])]
            assert cell["overall"]["config"] == overall
            assert [entry["family"] for entry in cell["by_family"]] == ["logistic", "tree"]
            for entry in cell["by_family"]:
                config, mean, sd, score = scores[entry["family"]]
                winner = entry["winner"]
                assert winner["config"] == config
                assert winner["inner_mean"] == pytest.approx(mean, abs=1e-12)
                assert winner["inner_std"] == pytest.approx(sd, abs=1e-12)
                assert winner["outer_score"] == pytest.approx(score, abs=1e-12)
                assert winner["optimism"] == pytest.approx(mean - score, abs=1e-12)


def test_every_winner_has_a_dom_hook_and_the_overall_one_is_marked(client, small_assessment):
    _push(client, small_assessment)
    page = client.get(f"/assessments/{small_assessment.uuid}/fold-winners").text
    hooks = _hooks(page)
    expected = _expected_winners(small_assessment, "roc_auc")
    assert len(hooks) == sum(len(scores) for _, scores in expected.values())
    marked = [hook for hook in hooks if hook.get("data-overall") == "true"]
    assert len(marked) == len(expected)
    for hook in marked:
        assert hook["data-config"] == expected[(int(hook["data-repeat"]), int(hook["data-outer-fold"]))][0]
    for hook in hooks:
        overall, scores = expected[(int(hook["data-repeat"]), int(hook["data-outer-fold"]))]
        assert scores[hook["data-family"]][0] == hook["data-config"]
    assert "checkbox" not in page.split('id="winner-grid"')[1].split("</table>")[0]


def test_repeats_are_the_rows_of_the_grid(client, repeated):
    _push(client, repeated)
    body = client.get(f"/api/assessments/{repeated.uuid}/fold-winners").json()
    assert [[cell["repeat"] for cell in row] for row in body["grid"]] == [[0, 0, 0], [1, 1, 1]]
    assert [[cell["outer_fold"] for cell in row] for row in body["grid"]] == [[0, 1, 2], [0, 1, 2]]
    assert body["n_folds"] == 6
    expected = _expected_winners(repeated, "roc_auc")
    assert {(c["repeat"], c["outer_fold"]): c["overall"]["config"] for row in body["grid"] for c in row} == {
        key: overall for key, (overall, _) in expected.items()}
    page = client.get(f"/assessments/{repeated.uuid}/fold-winners").text
    repeats = Counter(hook["data-repeat"] for hook in _hooks(page))
    assert repeats == {"0": 6, "1": 6}  # 3 outer folds × 2 families in each repeat


def test_stability_counts_each_chosen_value(client, repeated):
    _push(client, repeated)
    body = client.get(f"/api/assessments/{repeated.uuid}/fold-winners").json()
    winners = repeated.family_winners
    for family in body["stability"]:
        chosen = winners[winners["family"] == family["family"]]["params"].tolist()
        assert family["n_folds"] == len(chosen) == 6
        for parameter in family["parameters"]:
            counts = Counter(json.dumps(params[parameter["parameter"]]) for params in chosen)
            grid = [c.params[parameter["parameter"]] for c in repeated.payload.configurations
                    if c.family == family["family"]]
            assert [choice["value"] for choice in parameter["choices"]] == grid  # every grid value, in order
            for choice in parameter["choices"]:
                assert choice["count"] == counts.get(json.dumps(choice["value"]), 0)
                assert choice["share"] == pytest.approx(choice["count"] / len(chosen))
            assert sum(choice["count"] for choice in parameter["choices"]) == len(chosen)
    page = client.get(f"/assessments/{repeated.uuid}/fold-winners").text
    assert page.count('class="chart"') == len(body["stability"])
