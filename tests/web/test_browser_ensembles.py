"""The ensemble builder in a real headless Chromium (Debian's package), with the console watched for errors:
tick three fold winners, watch the estimate follow, save, reload, find the ensemble, download its spec."""

from __future__ import annotations

import json
import time
from urllib.parse import parse_qs, urlparse

import httpx
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

import foldwise
from foldwise.client import save

pytestmark = pytest.mark.browser

BUILDER = "#ensemble-builder"


@pytest.fixture(scope="module")
def three_families():
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [0.1, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 3]}),
             "knn": (make_pipeline(StandardScaler(), KNeighborsClassifier()),
                     {"kneighborsclassifier__n_neighbors": [9]})}
    return foldwise.nested_cv(space, X[::2], y[::2], outer=3, inner=2, scoring=["roc_auc", "accuracy"],
                              n_jobs=1, progress=False, name="three families for the builder")


def _settled(page, n_members: int) -> None:
    page.wait_for_function(
        "n => { const b = document.querySelector('#ensemble-builder');"
        " return b.dataset.members === String(n) && b.dataset.state === 'ready'; }", arg=n_members)


def _api_mean(live_server, uuid, members) -> float:
    response = httpx.post(f"{live_server.url}/api/assessments/{uuid}/ensembles/preview",
                          json={"members": members, "metric": "roc_auc"})
    return response.json()["mean"]


def test_tick_three_see_the_estimate_follow_save_reload_and_download_the_spec(browser, live_server,
                                                                                 three_families, tmp_path):
    save(three_families.payload, str(live_server.db_path))
    uuid = three_families.uuid
    context = browser.new_context(accept_downloads=True)
    started = time.monotonic()
    # The link `foldwise serve` prints carries the write key once; saving needs it.
    page, problems = open_watched(context, f"{live_server.url}/assessments/{uuid}?key={live_server.write_key}")
    assert "key=" not in page.url
    boxes = page.locator("input.ensemble-tick")
    assert boxes.count() == 3 * (1 + 3)  # per outer fold: the overall winner and each family's winner
    assert page.locator(f"{BUILDER} [data-estimate]").inner_text() == "–"

    chosen, seen = [], []
    for i in range(boxes.count()):
        if boxes.nth(i).get_attribute("value") not in chosen:
            chosen.append(boxes.nth(i).get_attribute("value"))
            seen.append(i)
        if len(chosen) == 3:
            break
    assert len(chosen) == 3
    estimates = []
    for n, i in enumerate(seen, start=1):
        boxes.nth(i).check()
        _settled(page, n)
        shown = page.locator(f"{BUILDER} [data-estimate]").inner_text()
        expected = _api_mean(live_server, uuid, chosen[:n])
        assert shown.startswith(f"{expected:.3f}")
        estimates.append(float(page.locator(BUILDER).get_attribute("data-estimate")))
    assert estimates[0] != estimates[2]  # the estimate follows the ticks
    # Every box of a ticked configuration shows it ticked: it counts once.
    for config in chosen:
        same = page.locator(f'input.ensemble-tick[value="{_css(config)}"]').all()
        assert all(box.is_checked() for box in same)
    caution = page.locator(f"{BUILDER} [data-caution]")
    assert caution.is_visible() and "optimistic for members picked by hand" in caution.inner_text()
    page.wait_for_selector(f"{BUILDER} [data-ensemble-chart][data-drawn=true]")
    assert page.locator(f"{BUILDER} [data-fold-table] tbody tr").count() == 3

    # The draft is in the query string: a copied URL shows the same ensemble.
    assert parse_qs(urlparse(page.url).query)["member"] == chosen
    copy, copy_problems = open_watched(context, page.url)
    _settled(copy, 3)
    shown = page.locator(f"{BUILDER} [data-estimate]").inner_text()
    assert copy.locator(f"{BUILDER} [data-estimate]").inner_text() == shown
    copy.close()

    page.fill(f"{BUILDER} input[name=name]", "three ticked")
    page.fill(f"{BUILDER} input[name=note]", "one per family")
    page.click(f"{BUILDER} button[type=submit]")
    page.wait_for_selector(f"{BUILDER}[data-saved]")
    page.reload(wait_until="load")
    link = page.locator("#saved-ensembles a", has_text="three ticked")
    assert link.count() == 1
    link.click()
    page.wait_for_load_state("load")
    page.wait_for_selector("#ensemble-chart[data-drawn=true]")
    assert "one per family" in page.content()
    with page.expect_download() as download:
        page.click("#spec-download")
    path = tmp_path / "spec.json"
    download.value.save_as(path)
    assert time.monotonic() - started < 60  # from the fold winners to a saved, downloaded ensemble
    spec = json.loads(path.read_text())
    assert [m["config"] for m in spec["members"]] == chosen and spec["name"] == "three ticked"
    assert problems == [] and copy_problems == []
    context.close()


def _css(value: str) -> str:
    return value.replace("\\", "\\\\").replace('"', '\\"')
