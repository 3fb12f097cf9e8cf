"""The comparison pages in a real headless Chromium: charts drawn, console clean, the URL holds the state."""

from __future__ import annotations

from urllib.parse import parse_qs, urlsplit

import httpx
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.naive_bayes import GaussianNB
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

import foldwise
from foldwise.client import save

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def stored(live_server):
    """Two assessments on the same outer splits (paired) and one on others, in the live server's store."""
    X, y = load_breast_cancer(return_X_y=True)
    X, y = X[::3], y[::3]

    def run(name, seed, depth):
        space = {
            "logistic": (make_pipeline(StandardScaler(), LogisticRegression(solver="liblinear")),
                         {"logisticregression__C": [0.1, 1.0]}),
            "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": depth}),
            "bayes": (GaussianNB(), {"var_smoothing": [1e-9, 1e-3]}),
        }
        outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=seed)
        assessment = foldwise.nested_cv(space, X, y, outer=outer, inner=3, scoring=["roc_auc", "accuracy"],
                                        n_jobs=1, progress=False, name=name)
        save(assessment.payload, str(live_server.db_path))
        return assessment

    return {"x": run("browser x", 0, [1, 3]), "y": run("browser y", 0, [2, 5]),
            "z": run("browser z", 1, [1, 3])}


def _open(browser, url, charts):
    page, problems = open_watched(browser, url)
    if charts:
        _wait_for_charts(page, charts)
    assert page.locator(".chart").count() == charts
    return page, problems


def _wait_for_charts(page, count):
    page.wait_for_function(f"document.querySelectorAll('.chart[data-drawn=true]').length === {count}",
                           timeout=15_000)


def _state(page):
    return {name: page.locator(f"#paired-form [name={name}]").input_value()
            for name in ("a", "b", "metric", "rope")}


def test_paired_page_draws_and_a_copied_url_reproduces_it(browser, live_server, stored):
    uuid = stored["x"].uuid
    base = f"{live_server.url}/assessments/{uuid}/compare"
    page, problems = _open(browser, base, charts=2)
    page.select_option("#paired-form [name=a]", "tree")
    page.select_option("#paired-form [name=b]", "logistic")
    page.select_option("#paired-form [name=metric]", "accuracy")
    page.fill("#paired-form [name=rope]", "0.02")
    page.click("#paired-form button[type=submit]")
    page.wait_for_url("**rope=0.02**")
    _wait_for_charts(page, 2)
    query = parse_qs(urlsplit(page.url).query)
    assert query == {"a": ["tree"], "b": ["logistic"], "metric": ["accuracy"], "rope": ["0.02"]}
    chosen, verdict = _state(page), page.locator("#verdict").inner_text()
    assert chosen == {"a": "tree", "b": "logistic", "metric": "accuracy", "rope": "0.02"}
    expected = httpx.get(f"{live_server.url}/api/assessments/{uuid}/compare",
                         params={"a": "tree", "b": "logistic", "metric": "accuracy", "rope": 0.02}).json()
    assert verdict == expected["verdict"]
    copied, more_problems = _open(browser, page.url, charts=2)
    assert (_state(copied), copied.locator("#verdict").inner_text()) == (chosen, verdict)
    assert copied.locator("#posterior-plot .main-svg").count() > 0
    assert problems == [] and more_problems == []
    page.close()
    copied.close()


def test_ranking_page_draws_cleanly(browser, live_server, stored):
    url = f"{live_server.url}/assessments/{stored['x'].uuid}/ranking?metric=accuracy"
    page, problems = _open(browser, url, charts=1)
    assert page.locator("select[name=metric]").input_value() == "accuracy"
    assert page.locator("#ranking-table tbody tr").count() == 3
    assert problems == []
    page.close()


def test_across_pages_draw_cleanly_paired_and_not(browser, live_server, stored):
    x, y, z = stored["x"].uuid, stored["y"].uuid, stored["z"].uuid
    url = f"{live_server.url}/compare?x={x}&y={y}&metric=roc_auc&rope=0.01"
    page, problems = _open(browser, url, charts=2)
    assert page.locator("#compare-form [name=x]").input_value() == x
    assert page.locator("#compare-form [name=y]").input_value() == y
    assert page.locator("#paired-table tbody tr").count() == 5  # selection, best family, three families
    page.select_option("#compare-form [name=y]", z)
    page.click("#compare-form button[type=submit]")
    page.wait_for_url(f"**y={z}**")
    _wait_for_charts(page, 1)
    assert "the folds hold different rows" in page.locator("#unpaired-reason").inner_text()
    assert page.locator("#paired-table").count() == 0
    assert problems == []
    page.close()
