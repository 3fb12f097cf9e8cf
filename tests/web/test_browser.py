"""The pages in a real headless Chromium (Debian's package), with the console watched for errors."""

from __future__ import annotations

import pytest

from foldwise.client import save

pytestmark = pytest.mark.browser


def _open(browser, url):
    page = browser.new_page()
    problems = []
    page.on("console", lambda message: problems.append(message.text) if message.type == "error" else None)
    page.on("pageerror", lambda error: problems.append(str(error)))
    response = page.goto(url, wait_until="load")
    assert response.status == 200
    return page, problems


def test_index_and_assessment_page_render_cleanly(browser, live_server, small_assessment):
    save(small_assessment.payload, str(live_server.db_path))
    page, problems = _open(browser, live_server.url + "/")
    link = page.get_by_role("link", name=small_assessment.name)
    assert link.count() == 1
    assert page.locator(".caution").is_visible()
    link.click()
    page.wait_for_load_state("load")
    assert page.url.endswith(f"/assessments/{small_assessment.uuid}")
    rows = page.locator("#fold-winners tbody tr")
    assert rows.count() == len(small_assessment.winners)
    page.select_option("select[name=metric]", "accuracy")
    page.wait_for_url("**metric=accuracy")
    assert page.locator("select[name=metric]").input_value() == "accuracy"
    assert problems == []
    page.close()
