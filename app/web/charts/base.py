"""The look every foldwise chart shares, and the one way a figure leaves the server."""

from __future__ import annotations

import plotly.graph_objects as go

FONT = "system-ui, -apple-system, Segoe UI, sans-serif"
INK, MUTED, GRID = "#1f2328", "#5b6470", "#ece9e2"


def styled(figure: go.Figure, *, x_title: str = "", y_title: str = "", height: int = 380) -> go.Figure:
    figure.update_layout(
        height=height, margin={"l": 60, "r": 20, "t": 30, "b": 50}, paper_bgcolor="white",
        plot_bgcolor="white", font={"family": FONT, "color": INK, "size": 13}, showlegend=False,
        hoverlabel={"font": {"family": FONT}})
    figure.update_xaxes(title_text=x_title, gridcolor=GRID, zerolinecolor=GRID, linecolor=MUTED)
    figure.update_yaxes(title_text=y_title, gridcolor=GRID, zerolinecolor=GRID, linecolor=MUTED)
    return figure


def figure_json(figure: go.Figure) -> str:
    """The figure as JSON for templates/_chart.html (which escapes it for the script tag)."""
    return figure.to_json()
