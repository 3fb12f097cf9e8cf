"""Markup in names stays text on every page, and a form on another origin cannot write, in real Chromium."""

from __future__ import annotations

import http.server
import threading

import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.client import save
from foldwise.store import list_assessments, make_engine

pytestmark = pytest.mark.browser

SCRIPT_FAMILY = "<script>alert('family')</script>"
IMAGE_NAME = "<img src=x onerror=alert('name')>"


@pytest.fixture(scope="module")
def hostile(live_server):
    X, y = load_breast_cancer(return_X_y=True)
    space = {SCRIPT_FAMILY: (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3]}),
             "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [0.1, 1.0]})}
    assessment = foldwise.nested_cv(space, X[::3], y[::3], outer=3, inner=3, scoring=["roc_auc"], n_jobs=1,
                                    progress=False, name=IMAGE_NAME, dataset="<b>bold</b> (breast cancer)")
    save(assessment.payload, str(live_server.db_path))
    return assessment


def test_markup_in_names_is_shown_as_text_and_never_runs(browser, live_server, hostile):
    page = browser.new_page()
    dialogs, problems = [], []
    page.on("dialog", lambda dialog: (dialogs.append(dialog.message), dialog.dismiss()))
    page.on("pageerror", lambda error: problems.append(str(error)))
    base = f"{live_server.url}/assessments/{hostile.uuid}"
    for url in (f"{live_server.url}/", base, f"{base}/distributions", f"{base}/fold-winners", f"{base}/optimism",
                f"{base}/inner", f"{base}/compare", f"{base}/ranking", f"{base}/cost"):
        assert page.goto(url, wait_until="load").status == 200, url
        page.wait_for_timeout(150)  # give any injected handler the chance to fire
        assert page.locator("script:not([src]):not([type='application/json'])").count() == 0, url
        assert page.locator("img[onerror]").count() == 0, url
    page.goto(base, wait_until="load")
    assert page.get_by_text(IMAGE_NAME).count() >= 1  # shown literally
    assert page.get_by_text(SCRIPT_FAMILY).count() >= 1
    assert dialogs == [] and problems == []
    page.close()


class _Evil(http.server.BaseHTTPRequestHandler):
    target = ""

    def do_GET(self):  # noqa: N802 (the standard library's name)
        body = (f'<form id="f" method="post" action="{self.target}" enctype="text/plain">'
                f'<input name=\'{{"x":"\' value=\'"}}\'></form>'
                '<script>document.getElementById("f").submit()</script>').encode()
        self.send_response(200)
        self.send_header("content-type", "text/html")
        self.send_header("content-length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, *args):
        pass


def test_a_form_posted_from_another_origin_is_refused(browser, live_server, hostile, unused_port):
    _Evil.target = f"{live_server.url}/api/assessments"
    evil = http.server.HTTPServer(("127.0.0.1", unused_port), _Evil)
    thread = threading.Thread(target=evil.serve_forever, daemon=True)
    thread.start()
    try:
        context = browser.new_context()
        page = context.new_page()
        page.goto(f"{live_server.url}/?key={live_server.write_key}")  # the victim holds the write cookie
        engine = make_engine(f"sqlite:///{live_server.db_path}")
        before = len(list_assessments(engine))
        with page.expect_response(lambda response: response.url == _Evil.target) as answer:
            page.goto(f"http://127.0.0.1:{unused_port}/")
        assert answer.value.status in (401, 403)  # refused: other origin (and no SameSite=Strict cookie)
        assert len(list_assessments(engine)) == before
        engine.dispose()
        context.close()
    finally:
        evil.shutdown()
        thread.join(timeout=5)
        evil.server_close()
