"""Static files and plotly.js: versioned URLs, a year's immutable cache, gzip as the client asks, and
the one chart configuration every page carries."""

from __future__ import annotations

import gzip
import hashlib
import json
import re
from importlib.resources import files
from pathlib import Path

import pytest

from foldwise.web import assets
from foldwise.web.charts.base import CONFIG

STATIC = Path(__file__).resolve().parents[2] / "static"
PLOTLY = Path(str(files("plotly") / "package_data" / "plotly.min.js"))  # the installed package's own copy
IMMUTABLE = "public, max-age=31536000, immutable"


def _linked(html: str) -> list[str]:
    return re.findall(r'(?:src|href)="http://testserver(/static/[^"]+)"', html)


def _original(name: str) -> bytes:
    return (PLOTLY if name == "vendor/plotly.min.js" else STATIC / name).read_bytes()


def test_pages_link_every_asset_by_its_content_hash(client, small_assessment):
    stored = client.post("/api/assessments", content=small_assessment.payload.model_dump_json(),
                         headers={"content-type": "application/json"})
    assert stored.status_code == 201
    page = client.get(f"/assessments/{small_assessment.uuid}/distributions").text
    linked = _linked(page)
    assert {"foldwise.css", "favicon.svg", "forms.js", "share.js", "charts.js", "vendor/plotly.min.js"} <= {
        url.split("/", 3)[3] for url in linked}
    for url in linked:
        digest, name = url.removeprefix("/static/").split("/", 1)
        assert digest == hashlib.sha256(_original(name)).hexdigest()[:12]  # hashlib, independently
        response = client.get(url, headers={"accept-encoding": "gzip"})
        assert response.status_code == 200
        assert response.headers["cache-control"] == IMMUTABLE
        assert response.headers["content-encoding"] == "gzip" and "accept-encoding" in response.headers["vary"].lower()
        assert response.content == _original(name)  # httpx undid the gzip


def test_plotly_travels_gzipped_compressed_once_and_whole(client):
    url = f"/static/{assets._digest(PLOTLY, PLOTLY.stat().st_mtime_ns, PLOTLY.stat().st_size)}/vendor/plotly.min.js"
    client.get(url)
    before = assets._encode.cache_info()
    with client.stream("GET", url, headers={"accept-encoding": "gzip"}) as response:
        raw = b"".join(response.iter_raw())
    assert assets._encode.cache_info().misses == before.misses  # served from memory, not compressed again
    assert response.headers["content-type"].startswith("text/javascript")
    assert int(response.headers["content-length"]) == len(raw) < 1_600_000  # about 1.47 of 4.8 MB
    assert gzip.decompress(raw) == PLOTLY.read_bytes()  # Python's gzip module reads it back whole


@pytest.mark.parametrize(("accepted", "gzipped"), [
    ("gzip, deflate, br", True), ("GZIP", True), ("*", True), ("br;q=1.0, gzip;q=0.5", True),
    ("identity", False), ("gzip;q=0", False), ("br", False), ("*;q=0", False), ("", False)])
def test_accept_encoding_is_honoured(client, accepted, gzipped):
    # RFC 9110, section 12.5.3: a coding is acceptable when listed (or matched by *) with a q above 0.
    with client.stream("GET", "/static/foldwise.css", headers={"accept-encoding": accepted}) as response:
        raw = b"".join(response.iter_raw())
    assert ("content-encoding" in response.headers) is gzipped
    assert (gzip.decompress(raw) if gzipped else raw) == (STATIC / "foldwise.css").read_bytes()


def test_plain_names_revalidate_and_unknown_or_stale_ones_are_404(client):
    plain = client.get("/static/foldwise.css", headers={"accept-encoding": "identity"})
    assert plain.headers["cache-control"] == "no-cache"
    again = client.get("/static/foldwise.css", headers={"accept-encoding": "identity",
                                                        "if-none-match": plain.headers["etag"]})
    assert again.status_code == 304 and again.content == b""
    stale = client.get("/static/000000000000/foldwise.css")
    assert stale.status_code == 404 and "reload the page" in stale.text
    for path in ("/static/nope.js", "/static/..%2Fpyproject.toml", "/static/../pyproject.toml", "/static/"):
        assert client.get(path).status_code == 404, path
    assert client.head("/static/charts.js").status_code == 200


def test_a_page_is_gzipped_when_the_browser_asks(client):
    with client.stream("GET", "/", headers={"accept-encoding": "gzip", "accept": "text/html"}) as response:
        raw = b"".join(response.iter_raw())
    assert response.headers["content-encoding"] == "gzip"
    assert b"foldwise" in gzip.decompress(raw)


def test_every_page_carries_the_one_chart_configuration(client):
    html = client.get("/").text
    found = re.search(r'<script type="application/json" id="foldwise-chart-style">(.*?)</script>', html, re.S)
    style = json.loads(found.group(1))
    assert style["config"] == CONFIG
    assert style["config"]["modeBarButtons"] == [["toImage", "resetScale2d"]]
    assert style["config"]["displaylogo"] is False and style["config"]["showSendToCloud"] is False
    assert style["config"]["showEditInChartStudio"] is False and style["config"]["showLink"] is False
    # The drawers read it rather than carrying a config of their own.
    for script in ("charts.js", "ensemble.js"):
        text = (STATIC / script).read_text()
        assert "foldwise-chart-style" in text and "displaylogo" not in text
