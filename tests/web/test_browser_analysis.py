"""The five analysis pages in a real headless Chromium (Debian's package), with the console watched."""

from __future__ import annotations

import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.tree import DecisionTreeClassifier
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

import foldwise
from foldwise.client import save

pytestmark = pytest.mark.browser

ALL_DRAWN = ("() => { const charts = document.querySelectorAll('.chart');"
             " return charts.length > 0 && [...charts].every(c => c.dataset.drawn === 'true'); }")


@pytest.fixture(scope="module")
def browser(browser):
    """One browser context for the module, so plotly.js is fetched once and then served from its cache."""
    context = browser.new_context()
    yield context
    context.close()


@pytest.fixture(scope="module")
def stored(live_server, small_assessment):
    """The shared small assessment and one with two repeats and a configuration that always fails."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [-1, 1, 2]}),
             "stump": (DecisionTreeClassifier(max_depth=1, random_state=0),
                       {"criterion": ["gini", "entropy"]})}
    with pytest.warns(RuntimeWarning, match="fits failed"):
        repeated = foldwise.nested_cv(space, X[::4], y[::4], inner=2, n_jobs=1, progress=False,
                                      outer=RepeatedStratifiedKFold(n_splits=2, n_repeats=2, random_state=0),
                                      scoring=["roc_auc", "accuracy"], name="two repeats, one failing")
    for assessment in (small_assessment, repeated):
        save(assessment.payload, str(live_server.db_path))
    return {"small": small_assessment, "repeated": repeated}


def _open(browser, url):
    page, problems = open_watched(browser, url)
    page.wait_for_function(ALL_DRAWN, timeout=15_000)
    return page, problems


@pytest.mark.parametrize(("which", "path"), [
    ("small", "distributions?by=config"), ("repeated", "distributions"), ("repeated", "fold-winners"),
    ("small", "optimism"), ("repeated", "optimism?level=family"), ("repeated", "inner?outer_fold=1"),
    ("small", "cost")])
def test_every_analysis_page_draws_its_charts_cleanly(browser, live_server, stored, which, path):
    page, problems = _open(browser, f"{live_server.url}/assessments/{stored[which].uuid}/{path}")
    charts = page.locator(".chart")
    assert charts.count() >= 1
    assert page.locator(".chart[data-drawn=true]").count() == charts.count()
    assert page.locator(".chart .main-svg").count() >= charts.count()  # plotly drew an svg in each
    assert page.locator(".caution").is_visible()
    assert problems == []
    page.close()


# The box traces of the drawn distributions (app/web/charts/distributions.py: fold lines and points are apart).
BOXES = "document.getElementById('distributions-plot').data.filter(trace => trace.type === 'box').length"


def test_a_copied_url_reproduces_the_distribution_view(browser, live_server, stored):
    assessment = stored["small"]
    url = f"{live_server.url}/assessments/{assessment.uuid}/distributions?metric=accuracy&by=config"
    page, problems = _open(browser, url)
    assert page.locator("select[name=metric]").input_value() == "accuracy"
    assert page.locator("select[name=by]").input_value() == "config"
    assert page.evaluate(BOXES) == len(assessment.payload.configurations)
    # Change the view with the form, then open the resulting URL in a fresh page, as a pasted link would.
    page.select_option("select[name=sort]", "name")
    page.uncheck("input[name=families][value=logistic]")
    page.click("form.filters button[type=submit]")
    page.wait_for_url("**sort=name**")
    page.wait_for_function(ALL_DRAWN)
    copied = page.url
    fresh, fresh_problems = _open(browser, copied)
    for current in (page, fresh):
        assert current.locator("select[name=metric]").input_value() == "accuracy"
        assert current.locator("select[name=by]").input_value() == "config"
        assert current.locator("select[name=sort]").input_value() == "name"
        assert not current.locator("input[name=families][value=logistic]").is_checked()
        assert current.locator("input[name=families][value=tree]").is_checked()
        tree = [c for c in assessment.payload.configurations if c.family == "tree"]
        assert current.evaluate(BOXES) == len(tree)
    assert problems == [] and fresh_problems == []
    page.close()
    fresh.close()


def test_fold_winner_hooks_and_a_copied_metric(browser, live_server, stored):
    assessment = stored["repeated"]
    url = f"{live_server.url}/assessments/{assessment.uuid}/fold-winners?metric=accuracy"
    page, problems = _open(browser, url)
    assert page.locator("select[name=metric]").input_value() == "accuracy"
    assert page.locator("#winner-grid tbody tr").count() == 2  # one row per repeat
    assert page.locator("[data-overall=true]").count() == 4  # 2 repeats × 2 outer folds
    assert page.locator("#winner-grid [data-config][data-family][data-repeat][data-outer-fold]").count() == 8
    assert page.locator(".stability .chart[data-drawn=true]").count() == 2
    assert problems == []
    page.close()


def test_inner_detail_steps_through_the_outer_folds(browser, live_server, stored):
    assessment = stored["repeated"]
    page, problems = _open(browser, f"{live_server.url}/assessments/{assessment.uuid}/inner?metric=accuracy")
    assert page.locator("a[rel=prev]").count() == 0
    page.click("a[rel=next]")
    page.wait_for_url("**outer_fold=1**")
    page.wait_for_function(ALL_DRAWN)
    page.click("a[rel=next]")
    page.wait_for_url("**repeat=1&outer_fold=0**")
    page.wait_for_function(ALL_DRAWN)
    assert page.locator("select[name=repeat]").input_value() == "1"
    assert page.locator("select[name=metric]").input_value() == "accuracy"
    assert page.locator("#fold-failures tbody tr").count() == 3  # max_depth=-1: 2 inner fits and its refit
    assert problems == []
    page.close()


def test_the_planner_keeps_its_design_in_the_url(browser, live_server, stored):
    assessment = stored["small"]
    page, problems = _open(browser, f"{live_server.url}/assessments/{assessment.uuid}/cost")
    assert page.locator("input[name=cores]").input_value() == "2"
    page.fill("input[name=cores]", "4")
    page.fill("input[name=outer]", "10")
    page.click("#planner button[type=submit]")
    page.wait_for_url("**cores=4**")
    page.wait_for_function(ALL_DRAWN)
    fresh, fresh_problems = _open(browser, page.url)
    assert fresh.locator("input[name=cores]").input_value() == "4"
    assert fresh.locator("input[name=outer]").input_value() == "10"
    assert fresh.locator("#projection th").last.inner_text() == "Wall time on 4 cores"
    assert problems == [] and fresh_problems == []
    page.close()
    fresh.close()
