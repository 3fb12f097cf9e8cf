"""The pages in a real headless Chromium (Debian's package), with the console watched for errors."""

from __future__ import annotations

import pytest
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

from foldwise.client import save

pytestmark = pytest.mark.browser


def test_index_and_assessment_page_render_cleanly(browser, live_server, small_assessment):
    save(small_assessment.payload, str(live_server.db_path))
    page, problems = open_watched(browser, live_server.url + "/")
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
