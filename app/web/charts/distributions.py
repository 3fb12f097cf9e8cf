"""Outer scores as points over a box, one box per family (its fold winners) or per configuration."""

from __future__ import annotations

import plotly.graph_objects as go

from foldwise.web.charts.base import figure_json, styled
from foldwise.web.formatting import params_text


def distribution_figure(groups, colours: dict[str, str], *, metric: str) -> str:
    """One box per group (``label``, ``family``, ``points`` with repeat, outer_fold, score, params)."""
    figure = go.Figure()
    for group in groups:
        points = [p for p in group.points if p["score"] is not None]
        colour = colours[group.family]
        figure.add_trace(go.Box(
            name=group.label, x=[group.label] * len(points), y=[p["score"] for p in points],
            boxpoints="all", jitter=0.35, pointpos=0, marker={"color": colour, "size": 7, "opacity": 0.85},
            line={"color": colour}, fillcolor=colour + "22", legendgroup=group.family,
            hovertext=[f"{group.family}: {params_text(p['params'])}<br>repeat {p['repeat']}, "
                       f"outer fold {p['outer_fold']}" for p in points],
            hovertemplate="%{y:.4f}<br>%{hovertext}<extra></extra>"))
    height = 420 if len(groups) <= 8 else 520
    figure = styled(figure, x_title="", y_title=f"outer score ({metric})", height=height)
    figure.update_xaxes(type="category", tickangle=-30 if len(groups) > 4 else 0)
    return figure_json(figure)
