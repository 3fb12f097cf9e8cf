"""Outer scores as horizontal boxes, one row per family (its fold winners) or per configuration.

Each row is a box with its mean marked, and one point per outer fold in the family's colour and shape.
The points of one outer fold sit at the same height inside every row and a thin line joins them across
the rows: the folds are paired (the same test rows), which is what the paired tests use.
"""

from __future__ import annotations

import math
from html import escape
from typing import TYPE_CHECKING

import plotly.graph_objects as go

from foldwise.web.charts.base import MUTED, figure_json, styled
from foldwise.web.formatting import params_text
from foldwise.web.metric_display import metric_display

if TYPE_CHECKING:  # the page module imports this one
    from foldwise.web.pages.score_distributions import ScoreGroup

ROW_HEIGHT, CHROME = 40, 110  # pixels per row, and for the axis, its title and the margins
_LANES = 0.5  # the points of a row spread over this share of its height, one lane per outer fold
_LABEL_LIMIT = 56


def distribution_figure(groups: list[ScoreGroup], colours: dict[str, str], symbols: dict[str, str], *,
                        metric: str) -> str:
    """One row per group (its label, family and points), first row on top."""
    display = metric_display(metric)
    folds = sorted({(p.repeat, p.outer_fold) for group in groups for p in group.points})
    lane = {fold: _LANES * ((k + 0.5) / len(folds) - 0.5) for k, fold in enumerate(folds)}
    scores = [{(p.repeat, p.outer_fold): display.value(p.score) for p in group.points if not math.isnan(p.score)}
              for group in groups]
    figure = go.Figure()
    # Every fold's line in one trace (a trace per fold cost most of the page's time at 100 outer folds): fold
    # after fold, each one point per row then a None that ends it; drawn first, under the boxes and points.
    x_lines, y_lines = [], []
    for fold in folds:
        x_lines += [row.get(fold) for row in scores] + [None]
        y_lines += [row_pos + lane[fold] for row_pos in range(len(groups))] + [None]
    figure.add_trace(go.Scatter(
        x=x_lines, y=y_lines, mode="lines", line={"color": MUTED, "width": 0.8}, opacity=0.45, connectgaps=False,
        name="outer folds", meta={"role": "fold", "folds": [list(fold) for fold in folds]},
        hoverinfo="skip", showlegend=False))
    for row_pos, (group, row) in enumerate(zip(groups, scores, strict=True)):
        colour = colours[group.family]
        figure.add_trace(go.Box(
            x=list(row.values()), y=[row_pos] * len(row), orientation="h", name=group.label, boxpoints=False,
            boxmean=True, width=0.7, line={"color": colour, "width": 1.5}, fillcolor=colour + "1f",
            meta={"role": "box", "family": group.family}, showlegend=False,
            hoverinfo="x", hoverlabel={"namelength": -1}))
    for family in dict.fromkeys(group.family for group in groups):
        mine = [(row_pos, group, row) for row_pos, (group, row) in enumerate(zip(groups, scores, strict=True))
                if group.family == family]
        points = [(row_pos, p, row[(p.repeat, p.outer_fold)]) for row_pos, group, row in mine
                  for p in group.points if not math.isnan(p.score)]
        figure.add_trace(go.Scatter(
            x=[value for _, _, value in points],
            y=[row_pos + lane[(p.repeat, p.outer_fold)] for row_pos, p, _ in points],
            mode="markers", name=family, meta={"role": "points", "family": family},
            marker={"color": colours[family], "symbol": symbols[family], "size": 8, "opacity": 0.9,
                    "line": {"color": "white", "width": 0.5}},
            hovertext=[f"{escape(family)}: {escape(params_text(p.params))}<br>repeat {p.repeat}, "
                       f"outer fold {p.outer_fold}" for _, p, _ in points],
            hovertemplate=f"{escape(display.name)} %{{x:.4f}}<br>%{{hovertext}}<extra></extra>"))
    figure = styled(figure, x_title=f"outer score: {display.label}",
                    height=CHROME + ROW_HEIGHT * max(len(groups), 1))
    figure.update_yaxes(tickmode="array", tickvals=list(range(len(groups))), ticktext=_labels(groups),
                        range=[len(groups) - 0.5, -0.5], automargin=True, showgrid=False, zeroline=False)
    figure.update_layout(showlegend=True, legend={"orientation": "h", "y": 1.0, "yanchor": "bottom", "x": 0},
                         margin={"l": 20, "t": 40})
    return figure_json(figure)


def _labels(groups) -> list[str]:
    """Row labels cut to fit beside the chart; two that would read alike are numbered apart."""
    texts = [group.label if len(group.label) <= _LABEL_LIMIT else group.label[: _LABEL_LIMIT - 1] + "…"
             for group in groups]
    return [escape(f"{text} #{i}" if texts.count(text) > 1 else text) for i, text in enumerate(texts)]
