"""How often each parameter value was a family's fold-winner choice: one small bar chart per family."""

from __future__ import annotations

import plotly.graph_objects as go

from foldwise.web.charts.base import figure_json, styled


def choice_bars_figure(parameters: list[dict], colour: str) -> str:
    """Bars of ``count`` for every ``parameter=value`` of a family's grid (``parameters`` as in the page)."""
    labels, counts, shares = [], [], []
    for parameter in parameters:
        short = parameter["parameter"].rsplit("__", 1)[-1]
        for value in parameter["choices"]:
            labels.append(f"{short}={value['label']}")
            counts.append(value["count"])
            shares.append(0.0 if value["share"] is None else value["share"])
    figure = go.Figure(go.Bar(x=labels, y=counts, customdata=shares, marker={"color": colour},
                              hovertemplate="%{x}: chosen %{y} times (%{customdata:.0%})<extra></extra>"))
    figure = styled(figure, y_title="outer folds", height=240)
    figure.update_layout(margin={"l": 50, "r": 10, "t": 10, "b": 70})
    figure.update_xaxes(type="category")
    figure.update_yaxes(rangemode="tozero", dtick=1 if max(counts, default=0) <= 10 else None)
    return figure_json(figure)
