"""Every page fits the window: no horizontal scroll of the page at 1280 × 800 and 1440 × 900, in a real
headless Chromium (Debian's package), for demo-shaped assessments and a 3 × 10 × 6 one.

A wide grid may scroll inside its own card (``.scroll``); the page itself may not. Screenshots of every page
checked land in /tmp/screens (or $FOLDWISE_SCREENS) for a person to look at; they are not compared.
"""

from __future__ import annotations

import os
from pathlib import Path

import httpx
import pytest
from layout_assessments import demo_shaped, large  # tests/web/layout_assessments.py
from watching import open_watched

from foldwise.client import save

pytestmark = pytest.mark.browser

VIEWPORTS = [(1280, 800), (1440, 900)]
ANALYSIS_PAGES = ["", "/distributions", "/fold-winners", "/optimism", "/inner", "/compare", "/ranking", "/cost"]
SCREENS = Path(os.environ.get("FOLDWISE_SCREENS", "/tmp/screens"))

# The page's overflow, and the elements whose right edge passes the window, to name them in a failure.
_OVERFLOW = """() => {
  const width = window.innerWidth, out = [];
  for (const node of document.querySelectorAll('body *')) {
    const box = node.getBoundingClientRect();
    if (box.right > width + 1 && !node.closest('.scroll')) {
      out.push(node.tagName.toLowerCase() + (node.id ? '#' + node.id : '') +
               (node.className && node.className.baseVal === undefined ? '.' + node.className : '') +
               ' right=' + Math.round(box.right));
    }
  }
  return {scrollWidth: document.documentElement.scrollWidth, innerWidth: width, culprits: out.slice(0, 8)};
}"""


@pytest.fixture(scope="module")
def layout_server(start_live_server, tmp_path_factory):
    server = start_live_server(tmp_path_factory.mktemp("layout"))
    assessments = [*demo_shaped(), large()]
    for assessment in assessments:
        save(assessment.payload, str(server.db_path))
    # A saved ensemble of the large assessment's overall fold winners, for its own page.
    big = assessments[-1]
    members = sorted(set(big.winners["config"]))[:4]
    answer = httpx.post(f"{server.url}/api/assessments/{big.uuid}/ensembles",
                        json={"name": "overall winners", "members": members},
                        headers={"authorization": f"Bearer {server.write_key}"}, timeout=60)
    assert answer.status_code == 201, answer.text
    return server, assessments, httpx.URL(answer.json()["url"]).path


def _pages(server, assessments, ensemble_url) -> list[str]:
    urls = ["/", "/compare", "/methods/interval", ensemble_url]
    first, second = assessments[0], assessments[1]
    urls.append(f"/compare?x={first.uuid}&y={second.uuid}")
    urls.append(f"/compare?x={assessments[-1].uuid}&y={assessments[-1].uuid}")
    for assessment in assessments:
        urls += [f"/assessments/{assessment.uuid}{suffix}" for suffix in ANALYSIS_PAGES]
    return urls


def test_no_page_scrolls_sideways_at_1280_or_1440(browser, layout_server):
    server, assessments, ensemble_url = layout_server
    SCREENS.mkdir(parents=True, exist_ok=True)
    context = browser.new_context(viewport={"width": VIEWPORTS[0][0], "height": VIEWPORTS[0][1]})
    overflowing, checked = [], []
    for n, path in enumerate(_pages(server, assessments, ensemble_url)):
        page, problems = open_watched(context, server.url + path)
        for width, height in VIEWPORTS:
            page.set_viewport_size({"width": width, "height": height})
            page.wait_for_function("() => [...document.querySelectorAll('.chart')]"
                                   ".every(c => c.dataset.drawn === 'true')")
            page.wait_for_timeout(150)  # the responsive charts follow the new width
            found = page.evaluate(_OVERFLOW)
            checked.append(f"{width}x{height} {path}")
            if found["scrollWidth"] > found["innerWidth"]:
                overflowing.append((width, path, found))
            page.screenshot(path=str(SCREENS / f"{n:02d}-{width}-{_slug(path)}.png"), full_page=True)
        assert problems == [], (path, problems)
        page.close()
    (SCREENS / "pages-checked.txt").write_text("\n".join(checked) + "\n")
    assert overflowing == [], overflowing
    context.close()


def _slug(path: str) -> str:
    return "".join(c if c.isalnum() else "-" for c in path.strip("/"))[:60] or "index"


def test_a_wide_grid_scrolls_in_its_card_to_the_last_fold_with_the_repeat_column_in_place(browser, layout_server):
    server, assessments, _ = layout_server
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    page, problems = open_watched(context, f"{server.url}/assessments/{assessments[-1].uuid}/fold-winners")
    scrolled = page.evaluate("""() => {
      const table = document.querySelector('#winner-grid'), box = table.closest('.scroll');
      box.scrollLeft = box.scrollWidth;
      const frame = box.getBoundingClientRect(), heads = table.querySelectorAll('thead th');
      const first = heads[0].getBoundingClientRect(), last = heads[heads.length - 1].getBoundingClientRect();
      return {wider: box.scrollWidth > box.clientWidth, lastText: heads[heads.length - 1].textContent,
              lastInside: last.right <= frame.right + 1 && last.left >= first.right - 1,
              firstInPlace: Math.abs(first.left - frame.left) <= 1};
    }""")
    # 10 outer folds do not fit 1280 px: the grid scrolls inside its card, the last fold can be reached,
    # and the repeat column stays at the card's left edge.
    assert scrolled == {"wider": True, "lastText": "Outer fold 9", "lastInside": True, "firstInPlace": True}
    assert problems == []
    context.close()


def test_a_refused_rope_is_shown_beside_its_field_with_the_comparison_drawn(browser, layout_server):
    server, assessments, _ = layout_server
    page = browser.new_page(viewport={"width": 1280, "height": 800})
    response = page.goto(f"{server.url}/assessments/{assessments[0].uuid}/compare?rope=-0.5&metric=roc_auc",
                         wait_until="load")
    assert response.status == 422
    page.wait_for_function("() => [...document.querySelectorAll('.chart')].every(c => c.dataset.drawn === 'true')")
    field, message = page.locator("#paired-form [name=rope]"), page.locator("#rope-error")
    assert field.input_value() == "-0.5" and message.is_visible() and "0 or more" in message.inner_text()
    # Beside the field: in its label, within a few lines of it.
    box, near = field.bounding_box(), message.bounding_box()
    assert abs(near["y"] - box["y"]) < 80 and abs(near["x"] - box["x"]) < 400
    assert page.locator("#verdict").is_visible()
    page.close()
