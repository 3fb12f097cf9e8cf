"""Inner mean against outer score per outer fold; on the worse side of the identity line the inner folds flattered."""

from __future__ import annotations

import math

import plotly.graph_objects as go

from foldwise.web.charts.base import MUTED, figure_json, styled
from foldwise.web.formatting import params_text
from foldwise.web.metric_display import metric_display
from foldwise.web.winner_rows import FoldWinner


def optimism_figure(points: list[FoldWinner], colours: dict[str, str], symbols: dict[str, str], *, metric: str) -> str:
    """One marker per fold winner with both scores, in its family's colour and shape.

    A negated loss is drawn as the loss itself, so for RMSE the flattered winners lie above the line."""
    display = metric_display(metric)
    figure = go.Figure()
    complete = [p for p in points if not (math.isnan(p.inner_mean) or math.isnan(p.outer_score))]
    values = [display.value(p.inner_mean) for p in complete] + [display.value(p.outer_score) for p in complete]
    if values:
        low, high = min(values), max(values)
        pad = (high - low) * 0.05 or 0.01
        figure.add_trace(go.Scatter(x=[low - pad, high + pad], y=[low - pad, high + pad], mode="lines",
                                    line={"color": MUTED, "dash": "dash", "width": 1}, hoverinfo="skip",
                                    name="inner = outer"))
    for family in colours:
        mine = [p for p in complete if p.family == family]
        if not mine:
            continue
        figure.add_trace(go.Scatter(
            x=[display.value(p.inner_mean) for p in mine], y=[display.value(p.outer_score) for p in mine],
            mode="markers", name=family,
            marker={"color": colours[family], "symbol": symbols[family], "size": 10, "opacity": 0.85,
                                 "line": {"color": "white", "width": 1}},
            customdata=[p.optimism for p in mine],
            hovertext=[f"{family}: {params_text(p.params)}<br>repeat {p.repeat}, outer fold {p.outer_fold}"
                       for p in mine],
            hovertemplate="inner %{x:.4f}, outer %{y:.4f}<br>optimism %{customdata:.4f}<br>%{hovertext}"
                          "<extra></extra>"))
    figure = styled(figure, x_title=f"inner mean: {display.label}", y_title=f"outer score: {display.label}",
                    height=440)
    figure.update_yaxes(scaleanchor="x", scaleratio=1)
    return figure_json(figure)
