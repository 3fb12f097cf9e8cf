"""An Assessment in a real Jupyter kernel (nbclient): its HTML summary, and a progress bar that is one widget or
one rewritten text line, with and without ipywidgets."""

from __future__ import annotations

import nbformat
import pytest
from nbclient import NotebookClient

RUN = """
import foldwise
from sklearn.datasets import load_iris
from sklearn.linear_model import LogisticRegression
X, y = load_iris(return_X_y=True)
assessment = foldwise.nested_cv({"logistic <b>": (LogisticRegression(max_iter=500), {"C": [0.1, 1.0, 10.0]})},
                                X, y, outer=3, inner=3, n_jobs=1, name="iris <script>")
assessment
"""
WITHOUT_WIDGETS = "import sys\nsys.modules['ipywidgets'] = None  # as if it were not installed"


def _run(*cells: str) -> list[dict]:
    notebook = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(cell) for cell in cells])
    NotebookClient(notebook, timeout=120, kernel_name="python3").execute()
    return notebook.cells[-1].outputs


def _html(outputs: list[dict]) -> str:
    [html] = [output["data"]["text/html"] for output in outputs if "text/html" in output.get("data", {})]
    return html


@pytest.mark.parametrize("widgets", [True, False], ids=["with ipywidgets", "without ipywidgets"])
def test_a_notebook_shows_the_summary_and_one_progress_bar(widgets):
    outputs = _run(RUN) if widgets else _run(WITHOUT_WIDGETS, RUN)
    html = _html(outputs)
    assert "Nested estimate of <code>accuracy</code>" in html and "over 3 outer folds" in html
    assert "&lt;script&gt;" in html and "<script>" not in html  # names are shown as text
    assert "Fold winners" in html and "logistic &lt;b&gt;" in html
    streams = "".join(output.get("text", "") for output in outputs if output["output_type"] == "stream")
    assert "Warning" not in streams and "IProgress" not in streams
    widget = [output for output in outputs if "application/vnd.jupyter.widget-view+json" in output.get("data", {})]
    if widgets:
        assert len(widget) == 1
    else:
        assert not widget
        # One line rewritten with carriage returns, ended once: not one line per update.
        assert "36/36" in streams and streams.count("\n") <= 1 and streams.count("\r") >= 1
