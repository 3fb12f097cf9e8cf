"""Saving an ensemble in a real headless Chromium (Debian's package): members read as on the rest of the page,
Save waits for a tick, saving the same members again asks first, and a read-key visitor sees the estimate
but no Save form."""

from __future__ import annotations

import httpx
import pytest
from layout_assessments import recorded  # tests/web/layout_assessments.py
from watching import open_watched

from foldwise.client import save
from foldwise.keys import KeyFile

pytestmark = pytest.mark.browser

BUILDER = "#ensemble-builder"
SPACE = {"logistic regression": (None, {"logisticregression__C": [0.1, 1.0]}),
         "k-nearest neighbours": (None, {"kneighborsclassifier__n_neighbors": [5, 15]})}


@pytest.fixture(scope="module")
def served(start_live_server, tmp_path_factory):
    folder = tmp_path_factory.mktemp("saving")
    read_key = KeyFile(folder / "config" / "keys.json").create("read").secret
    server = start_live_server(folder)
    assessment = recorded("two families to save", SPACE, ["roc_auc", "accuracy"], n_repeats=1, n_outer=3,
                          n_inner=2, task="classification", seed=5)
    save(assessment.payload, str(server.db_path))
    return server, assessment, read_key


def _settled(page, n_members: int) -> None:
    page.wait_for_function(
        "n => { const b = document.querySelector('#ensemble-builder');"
        " return b.dataset.members === String(n) && b.dataset.state === 'ready'; }", arg=n_members)


def _saved(server, uuid) -> list[dict]:
    return httpx.get(f"{server.url}/api/assessments/{uuid}/ensembles").json()


def test_save_waits_for_a_tick_labels_members_and_asks_before_saving_the_same_members_again(browser, served):
    server, assessment, _ = served
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    page, problems = open_watched(context, f"{server.url}/assessments/{assessment.uuid}?key={server.write_key}")
    save_button = page.locator(f"{BUILDER} [data-save-button]")
    assert save_button.is_disabled()
    page.locator(f"{BUILDER} button[data-pick=overall]").click()
    members = sorted(set(assessment.winners["config"]))
    _settled(page, len(members))
    assert save_button.is_enabled()
    # Each member as the tables show it: the family's colour dot, its name and the short parameter text.
    items = page.locator(f"{BUILDER} [data-member-list] li")
    assert items.count() == len(members)
    for n in range(items.count()):
        text = items.nth(n).inner_text()
        assert "{" not in text and ":" not in text.split(" family winner")[0], text
        assert text.split(" ")[0] in ("logistic", "k-nearest")
        assert items.nth(n).locator(".dot").count() == 1
    assert page.locator(f"{BUILDER} [data-member-list] code").count() == len(members)  # each has parameters

    page.fill(f"{BUILDER} input[name=name]", "overall winners")
    save_button.click()
    page.wait_for_selector(f"{BUILDER}[data-saved]")
    assert len(_saved(server, assessment.uuid)) == 1
    # The same members again: it asks, and nothing is stored until "Save again".
    page.fill(f"{BUILDER} input[name=name]", "overall winners, again")
    save_button.click()
    page.wait_for_function("() => document.querySelector('#ensemble-builder').dataset.state === 'asking'")
    assert page.locator(f"{BUILDER} [data-duplicate]").is_visible()
    assert "overall winners" in page.locator(f"{BUILDER} [data-duplicate-text]").inner_text()
    assert len(_saved(server, assessment.uuid)) == 1
    page.locator(f"{BUILDER} [data-save-again]").click()
    page.wait_for_function("() => document.querySelector('#ensemble-builder').dataset.state === 'ready'")
    page.wait_for_function("() => document.querySelector('[data-message]').textContent.startsWith('Saved')")
    assert len(_saved(server, assessment.uuid)) == 2
    # Clearing the ticks disables Save again.
    page.locator(f"{BUILDER} button[data-pick=clear]").click()
    page.wait_for_function("() => document.querySelector('#ensemble-builder').dataset.members === '0'")
    assert save_button.is_disabled()
    assert problems == []
    context.close()


def test_a_read_key_visitor_sees_the_estimate_but_no_save_form(browser, served):
    server, assessment, read_key = served
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    page, problems = open_watched(context, f"{server.url}/assessments/{assessment.uuid}?key={read_key}")
    assert page.locator(f"{BUILDER} [data-save-form]").count() == 0
    assert "read key" in page.locator("#save-needs-write-key").inner_text()
    page.locator(f"{BUILDER} button[data-pick=overall]").click()
    _settled(page, len(set(assessment.winners["config"])))
    assert page.locator(f"{BUILDER} [data-estimate]").inner_text().strip() not in ("", "–")
    assert problems == []
    context.close()
