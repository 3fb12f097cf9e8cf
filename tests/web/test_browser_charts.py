"""Chart pages in a real headless Chromium (Debian's package): the toolbar offers only a PNG download and
resetting the axes, nothing the page does leaves loopback, and the bytes a chart page costs cold and warm."""

from __future__ import annotations

from urllib.parse import urlsplit

import pytest
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

from foldwise.client import save

pytestmark = pytest.mark.browser

ALL_DRAWN = ("() => { const charts = document.querySelectorAll('.chart');"
             " return charts.length > 0 && [...charts].every(c => c.dataset.drawn === 'true'); }")
# The titles plotly.js gives its two buttons (from its English locale, read in the bundled plotly.min.js).
ALLOWED = ["Download plot as a PNG", "Reset axes"]
COLD_LIMIT, WARM_LIMIT = 1_600_000, 60_000  # bytes over the wire, the targets


@pytest.fixture(scope="module")
def chart_page(live_server, small_assessment):
    save(small_assessment.payload, str(live_server.db_path))
    return f"{live_server.url}/assessments/{small_assessment.uuid}/distributions?metric=roc_auc"


def _loopback_only(requests, live_server):
    """Every request went to the dashboard itself (or stayed inside the page as data:/blob:)."""
    ours = urlsplit(live_server.url).netloc
    away = [url for url in requests if not url.startswith(("data:", "blob:")) and urlsplit(url).netloc != ours]
    assert away == []


def _toolbar_titles(page, chart):
    chart.hover()
    return [button.get_attribute("data-title") for button in chart.locator(".modebar-btn").all()]


def test_every_chart_toolbar_has_png_and_reset_only_and_nothing_leaves_loopback(
        browser, live_server, small_assessment, chart_page):
    context = browser.new_context(accept_downloads=True)
    requests = []
    context.on("request", lambda request: requests.append(request.url))
    page, problems = open_watched(context, chart_page)
    page.wait_for_function(ALL_DRAWN)
    charts = page.locator(".chart")
    assert charts.count() >= 1
    for i in range(charts.count()):
        assert _toolbar_titles(page, charts.nth(i)) == ALLOWED
    assert page.locator(".modebar-btn--logo, a[href*='plot.ly'], a[href*='plotly.com']").count() == 0
    with page.expect_download() as download:  # the PNG is drawn in the page, not fetched
        charts.first.locator(".modebar-btn[data-title='Download plot as a PNG']").click()
    assert download.value.suggested_filename == "foldwise-chart.png"

    # The chart static/ensemble.js draws reads the same configuration.
    page.goto(f"{live_server.url}/assessments/{small_assessment.uuid}?key={live_server.write_key}")
    page.locator("#ensemble-builder button[data-pick=overall]").click()
    chart = page.locator("[data-ensemble-chart]")
    page.wait_for_function("() => document.querySelector('[data-ensemble-chart]').dataset.drawn === 'true'")
    assert _toolbar_titles(page, chart) == ALLOWED
    assert problems == []
    _loopback_only(requests, live_server)
    context.close()


def _bytes_of_a_visit(page, url) -> tuple[int, int]:
    """Bytes received over the network for ``url`` and everything it loads (Chrome DevTools Protocol's
    encodedDataLength: headers and the compressed body), and the number of requests that reached the wire."""
    session = page.context.new_cdp_session(page)
    session.send("Network.enable")
    received, from_cache = {}, set()
    session.on("Network.loadingFinished",
               lambda event: received.__setitem__(event["requestId"], event["encodedDataLength"]))
    session.on("Network.requestServedFromCache", lambda event: from_cache.add(event["requestId"]))
    page.goto(url, wait_until="load")
    page.wait_for_function(ALL_DRAWN)
    session.detach()
    wire = {request: size for request, size in received.items() if request not in from_cache}
    return sum(wire.values()), sum(1 for size in wire.values() if size > 0)


def test_a_chart_page_costs_little_cold_and_almost_nothing_warm(browser, live_server, chart_page):
    context = browser.new_context()
    requests = []
    context.on("request", lambda request: requests.append(request.url))
    page = context.new_page()
    cold, cold_requests = _bytes_of_a_visit(page, chart_page)
    warm, warm_requests = _bytes_of_a_visit(page, chart_page)
    print(f"\nchart page: {cold:,} bytes cold in {cold_requests} requests, {warm:,} warm in {warm_requests}")
    assert 1_000_000 < cold <= COLD_LIMIT  # plotly.js gzipped is most of it; uncompressed it is 4.8 MB
    assert warm <= WARM_LIMIT
    assert warm_requests == 1  # the page itself; every asset came from the cache without asking
    _loopback_only(requests, live_server)
    context.close()
