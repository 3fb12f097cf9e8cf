"""A running assessment watched in a real headless Chromium (Debian's package): on the index and on its own
page the progress bar moves while a real run with ``live=`` reports to a real server, the page fills in
fold by fold, and gives way to the assessment's page when the run finishes, with the console clean."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

pytestmark = [pytest.mark.browser, pytest.mark.server]


def _launch_assessment(server, name: str, out: Path) -> subprocess.Popen:
    environment = {**os.environ, "PYTHONWARNINGS": "ignore", "FOLDWISE_KEY": server.write_key,
                   "FOLDWISE_TEST_FIT_PAUSE": "0.25",
                   "PYTHONPATH": os.pathsep.join([str(Path(__file__).parent), os.environ.get("PYTHONPATH", "")])}
    return subprocess.Popen([sys.executable, "-c", "import live_child; live_child.main()", server.url, name, str(out)],
                            env=environment, start_new_session=True)


def _wait_for_run(server, name: str, timeout: float = 120.0) -> dict:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        for run in httpx.get(f"{server.url}/api/live").json():
            if run["name"] == name and run["fits_done"] > 0:
                return run
        time.sleep(0.1)
    raise AssertionError(f"{name!r} did not report in time")


def test_the_progress_bar_moves_and_the_page_gives_way_to_the_assessment(browser, live_server, tmp_path):
    out = tmp_path / "uuid"
    child = _launch_assessment(live_server, "run watched in a browser", out)
    try:
        run = _wait_for_run(live_server, "run watched in a browser")
        index, index_problems = open_watched(browser, live_server.url + "/")
        row_bar = index.locator(f'#running tr[data-uuid="{run["uuid"]}"] progress')
        first = float(row_bar.get_attribute("value"))
        # The index's script moves the bar without a reload.
        index.wait_for_function(f"() => document.querySelector('#running tr[data-uuid=\"{run['uuid']}\"] progress')"
                                f".value > {first}", timeout=60_000)
        index.close()

        page, problems = open_watched(browser, run["url"])
        assert "partial: over" in page.locator("#partial-estimate").inner_text()
        start = float(page.locator("#live-progress").get_attribute("value"))
        page.wait_for_function(f"() => document.getElementById('live-progress') !== null && "
                               f"document.getElementById('live-progress').value > {start}", timeout=60_000)
        # A completed fold appears in the table (the page loads again when one does).
        page.wait_for_function("() => document.querySelectorAll('#live-folds tr.done').length >= 1", timeout=60_000)
        # At the end the run's page gives way to its assessment's.
        page.wait_for_url(f"**/assessments/{run['uuid']}", timeout=120_000)
        assert child.wait(timeout=60) == 0
        assert out.read_text() == run["uuid"]
        assert page.locator("#fold-winners tbody tr").count() > 0
        assert index_problems == [] and problems == []
        page.close()
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
