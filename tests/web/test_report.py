"""The reviewer's report: one self-contained HTML file whose numbers are the dashboard's, opened and printed in a
real Chromium with the network blocked."""

from __future__ import annotations

import re
import subprocess
import sys

import pytest
from sklearn.datasets import load_wine
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.web.report import report_html


@pytest.fixture(scope="module")
def shipped():
    """A real run on the bundled wine data with a final selection, and names that must stay text."""
    X, y = load_wine(return_X_y=True)
    space = {"logistic <i>": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                              {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    return foldwise.nested_cv(space, X, y, outer=3, inner=3, n_jobs=1, progress=False, final=True,
                              name="wine <script>alert(1)</script>", dataset="wine (scikit-learn bundled)")


def _text(html: str, element_id: str) -> str:
    match = re.search(rf'id="{element_id}"[^>]*>(.*?)</', html, flags=re.S)
    assert match, element_id
    return " ".join(match.group(1).split())


def test_the_report_numbers_are_the_apis(client, shipped):
    assert client.post("/api/assessments", content=shipped.payload.model_dump_json(),
                       headers={"content-type": "application/json"}).status_code == 201
    response = client.get(f"/assessments/{shipped.uuid}/report")
    assert response.status_code == 200 and response.headers["content-type"].startswith("text/html")
    assert "attachment" in response.headers["content-disposition"]
    html = response.text
    body = client.get(f"/api/assessments/{shipped.uuid}").json()
    estimate = body["nested_estimate"]
    assert _text(html, "nested-estimate") == f"accuracy {estimate['mean']:.3f} ± {estimate['sd']:.3f}"
    interval = body["headline"]["interval"]  # the overview's headline interval, the same numbers in the report
    assert interval["method"] == "corrected_t"
    assert _text(html, "headline-interval") == f"95% interval <strong>{interval['low']:.3f} to {interval['high']:.3f}"
    families = re.search(r'id="families".*?</table>', html, flags=re.S).group(0)
    for row in body["family_summary"]:
        name = row["family"].replace("<", "&lt;").replace(">", "&gt;")
        assert re.search(rf"<td>{re.escape(name)}</td>.*?<td class=\"num\">{row['mean']:.3f}</td>", families, re.S)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html and "<script" not in html
    choice = shipped.final_choice
    escaped = choice.family.replace("<", "&lt;").replace(">", "&gt;")
    assert f"On all rows the procedure chose <strong>{escaped}" == _text(html, "final-choice")


def test_an_unknown_assessment_has_no_report(client):
    assert client.get("/assessments/00000000-0000-0000-0000-000000000000/report").status_code == 404
    assert client.get("/assessments/not-a-uuid/report").status_code == 404


def test_the_command_writes_the_report_and_refuses_an_unknown_uuid(tmp_path, shipped):
    store = tmp_path / "runs.db"
    shipped.save(str(store))
    output = tmp_path / "report.html"
    done = subprocess.run([sys.executable, "-m", "foldwise.cli", "report", shipped.uuid, "-o", str(output),
                           "--db", str(store)], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert output.read_text(encoding="utf-8").count("<section>") == 7
    missing = subprocess.run([sys.executable, "-m", "foldwise.cli", "report", "00000000-0000-0000-0000-000000000000",
                              "--db", str(store)], capture_output=True, text=True, timeout=120)
    assert missing.returncode == 2 and "holds no assessment" in missing.stderr and "Traceback" not in missing.stderr


@pytest.mark.browser
def test_the_report_opens_and_prints_with_the_network_blocked(browser, tmp_path, shipped):
    path = tmp_path / "report.html"
    path.write_text(report_html(shipped), encoding="utf-8")
    context = browser.new_context()
    requested = []

    def refuse_all_but_the_file(route):
        requested.append(route.request.url)
        if route.request.url == path.as_uri():
            route.continue_()
        else:
            route.abort()

    context.route("**/*", refuse_all_but_the_file)
    page = context.new_page()
    problems = []
    page.on("console", lambda message: problems.append(message.text) if message.type == "error" else None)
    page.on("pageerror", lambda error: problems.append(str(error)))
    page.goto(path.as_uri(), wait_until="load")
    assert requested == [path.as_uri()]  # nothing but the file itself: no script, style or font from anywhere
    assert problems == []
    assert page.locator("svg.strip circle").count() == 6  # 3 outer folds × 2 families, every point drawn
    assert page.locator("#fold-winners tbody tr").count() == 3
    pdf = page.pdf(format="A4")
    assert pdf.startswith(b"%PDF") and len(re.findall(rb"/Type\s*/Page[^s]", pdf)) >= 2
    context.close()
