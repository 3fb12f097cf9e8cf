"""Inner mean against outer score per outer fold; below the identity line the inner folds flattered."""

from __future__ import annotations

import plotly.graph_objects as go

from foldwise.web.charts.base import MUTED, figure_json, styled
from foldwise.web.formatting import params_text


def optimism_figure(points: list[dict], colours: dict[str, str], *, metric: str) -> str:
    """One marker per fold winner (``points``: rows of frames.winners_frame), coloured by family."""
    figure = go.Figure()
    complete = [p for p in points if p["inner_mean"] is not None and p["outer_score"] is not None]
    values = [p["inner_mean"] for p in complete] + [p["outer_score"] for p in complete]
    if values:
        low, high = min(values), max(values)
        pad = (high - low) * 0.05 or 0.01
        figure.add_trace(go.Scatter(x=[low - pad, high + pad], y=[low - pad, high + pad], mode="lines",
                                    line={"color": MUTED, "dash": "dash", "width": 1}, hoverinfo="skip",
                                    name="inner = outer"))
    for family in colours:
        mine = [p for p in complete if p["family"] == family]
        if not mine:
            continue
        figure.add_trace(go.Scatter(
            x=[p["inner_mean"] for p in mine], y=[p["outer_score"] for p in mine], mode="markers",
            name=family, marker={"color": colours[family], "size": 10, "opacity": 0.85,
                                 "line": {"color": "white", "width": 1}},
            customdata=[p["optimism"] for p in mine],
            hovertext=[f"{family}: {params_text(p['params'])}<br>repeat {p['repeat']}, "
                       f"outer fold {p['outer_fold']}" for p in mine],
            hovertemplate="inner %{x:.4f}, outer %{y:.4f}<br>optimism %{customdata:.4f}<br>%{hovertext}"
                          "<extra></extra>"))
    figure = styled(figure, x_title=f"inner mean ({metric})", y_title=f"outer score ({metric})", height=440)
    figure.update_yaxes(scaleanchor="x", scaleratio=1)
    return figure_json(figure)
