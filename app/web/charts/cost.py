"""CPU seconds per family, inner fits and outer refits stacked, in each family's colour."""

from __future__ import annotations

import plotly.graph_objects as go

from foldwise.web.charts.base import figure_json, styled


def cost_figure(by_family: list, colours: dict[str, str]) -> str:
    """Stacked bars of rows (``compute_cost.FamilyCost``) with ``family``, ``inner_seconds``,
    ``outer_seconds``; outer refits hatched."""
    names = [row.family for row in by_family]
    bar_colours = [colours[name] for name in names]
    figure = go.Figure()
    for level, pattern in (("inner", ""), ("outer", "/")):
        figure.add_trace(go.Bar(
            x=names, y=[getattr(row, f"{level}_seconds") or 0.0 for row in by_family], name=f"{level} fits",
            marker={"color": bar_colours,
                    "pattern": {"shape": pattern, "fgcolor": "white", "solidity": 0.35}},
            hovertemplate="%{x}, " + level + " fits: %{y:.2f} s<extra></extra>"))
    figure = styled(figure, y_title="CPU seconds (fit + score)", height=320)
    figure.update_layout(barmode="stack", showlegend=True, legend={"orientation": "h", "y": 1.12})
    figure.update_xaxes(type="category")
    return figure_json(figure)
