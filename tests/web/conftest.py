"""A real headless Chromium (Debian's package) for the page tests: skipped locally when missing, never in CI."""

from __future__ import annotations

import os
import shutil

import pytest

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
# Without the background-networking flags Chromium keeps calling home, which this closed network refuses.
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync"]


@pytest.fixture(scope="session")
def browser():
    if not os.path.exists(CHROMIUM):
        if os.environ.get("CI"):
            pytest.fail("CI must run the browser tests: install Debian's chromium package")
        pytest.skip("Debian's chromium is not installed (`apt-get install chromium`)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=CHROMIUM, headless=True, args=FLAGS)
        yield browser
        browser.close()
