"""One outer fold as a heatmap: configurations (grouped by family, winners marked) × inner folds."""

from __future__ import annotations

from html import escape

import plotly.graph_objects as go

from foldwise.web.charts.base import figure_json, styled
from foldwise.web.formatting import params_text
from foldwise.web.metric_display import metric_display

_SCALES = {"scores": [[0, "#f4f1ea"], [1, "#1b6f8a"]], "fit_times": [[0, "#f4f1ea"], [1, "#8a5a1b"]]}
_TEXT = {"scores": "%{z:.3f}", "fit_times": "%{z:.3g}"}
OVERALL_MARK, FAMILY_MARK = "★", "☆"


def inner_heatmap_figure(configs, colours: dict[str, str], *, value: str, metric: str) -> str:
    """``value`` is ``"scores"`` (of ``metric``) or ``"fit_times"``: the ConfigRow field drawn; failed fits
    stay blank. Scores are shown as metric_display shows them, the darker end always the better one."""
    display = metric_display(metric)
    labels = _labels(configs, colours)
    z = [getattr(row, value) for row in configs]
    if value == "scores":
        z = [[display.value(score) for score in row] for row in z]
    title = f"inner {display.label}" if value == "scores" else "fit time (s)"
    n_folds = len(z[0]) if z else 0
    small = len(configs) * n_folds <= 300
    figure = go.Figure(go.Heatmap(
        z=z, x=[f"inner {i}" for i in range(n_folds)], y=labels, colorscale=_SCALES[value],
        colorbar={"title": {"text": title, "side": "right"}, "thickness": 12}, hoverongaps=False,
        reversescale=value == "scores" and display.negated,
        texttemplate=(_TEXT[value] if small else None), xgap=1, ygap=1,
        hovertemplate="%{y}<br>%{x}: %{z:.4f}<extra></extra>"))
    figure = styled(figure, height=max(260, 60 + 26 * len(configs)))
    figure.update_layout(margin={"l": 10, "r": 10, "t": 20, "b": 40})
    figure.update_yaxes(autorange="reversed", type="category", automargin=True)
    figure.update_xaxes(type="category", side="top")
    return figure_json(figure)


def _labels(configs, colours: dict[str, str]) -> list[str]:
    texts = [f"{_mark(row)}{row.family}: {params_text(row.params)}" for row in configs]
    # Two configurations whose shortened parameters read alike would share a row: number them apart.
    texts = [f"{text} #{i}" if texts.count(text) > 1 else text for i, text in enumerate(texts)]
    return [f'<span style="color:{colours[row.family]}">■</span> {escape(text)}'
            for row, text in zip(configs, texts, strict=True)]


def _mark(row) -> str:
    if row.overall_winner:
        return OVERALL_MARK + " "
    return FAMILY_MARK + " " if row.family_winner else ""
