"""The look every foldwise chart shares, and the one way a figure leaves the server.

The layout, axis style and Plotly config are defined here once. Server-built figures get them through
``styled``; the page carries ``chart_style()`` as JSON (templates/base.html), from which static/charts.js
takes the config and static/ensemble.js the config and look of the charts it draws in the browser.
"""

from __future__ import annotations

import json

import plotly.graph_objects as go

FONT = "system-ui, -apple-system, Segoe UI, sans-serif"
INK, MUTED, GRID = "#1f2328", "#5b6470", "#ece9e2"

LAYOUT = {"margin": {"l": 60, "r": 20, "t": 30, "b": 50}, "paper_bgcolor": "white", "plot_bgcolor": "white",
          "font": {"family": FONT, "color": INK, "size": 13}, "showlegend": False,
          "hoverlabel": {"font": {"family": FONT}}}
AXIS = {"gridcolor": GRID, "zerolinecolor": GRID, "linecolor": MUTED}
# The toolbar offers a PNG download and resetting the axes, nothing else: no vendor logo, and no link or
# button that would send a chart (and the data in it) off this machine.
CONFIG = {"responsive": True, "displaylogo": False, "showLink": False, "showSendToCloud": False,
          "showEditInChartStudio": False, "modeBarButtons": [["toImage", "resetScale2d"]],
          "toImageButtonOptions": {"format": "png", "filename": "foldwise-chart", "scale": 2}}


def styled(figure: go.Figure, *, x_title: str = "", y_title: str = "", height: int = 380) -> go.Figure:
    figure.update_layout(height=height, **LAYOUT)
    figure.update_xaxes(title_text=x_title, **AXIS)
    figure.update_yaxes(title_text=y_title, **AXIS)
    return figure


def figure_json(figure: go.Figure) -> str:
    """The figure as JSON for templates/_chart.html (which escapes it for the script tag)."""
    return figure.to_json()


def chart_style() -> str:
    """The config, layout, axis style and inks as JSON, for the charts drawn in the browser."""
    return json.dumps({"config": CONFIG, "layout": LAYOUT, "axis": AXIS,
                       "colours": {"ink": INK, "muted": MUTED, "grid": GRID}}, sort_keys=True)
