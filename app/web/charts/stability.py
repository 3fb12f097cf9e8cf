"""The parameter-stability strip of one family: one row per parameter, one cell per outer fold.

Each cell holds the value the family's fold winner chose in that outer fold, written in the cell and
shaded by its position in the grid, so a parameter that never moves reads as one even band and one that
hops from fold to fold reads as a patchwork. Only a nested design has a winner per outer fold to show.
"""

from __future__ import annotations

import json
from html import escape
from typing import TYPE_CHECKING

import plotly.graph_objects as go

from foldwise.web.charts.base import figure_json, styled

if TYPE_CHECKING:  # the page module imports this one
    from foldwise.web.pages.fold_winners import Choice, FoldPick, ParameterChoices

NOT_SET = "(not set)"  # a grid point that leaves the parameter at its default
ROW_HEIGHT, CHROME = 38, 70  # pixels per parameter, and for the fold labels and margins
_TEXT_LIMIT = 12


def parameter_strip_figure(parameters: list[ParameterChoices], folds: list[FoldPick], colour: str, *,
                           repeated: bool) -> str:
    """``parameters``: the family's grid, in grid order; ``folds``: every outer fold in order, with the params of
    its winner (None where it had none)."""
    columns = [f"r{fold.repeat}·f{fold.outer_fold}" if repeated else f"fold {fold.outer_fold}" for fold in folds]
    shade, text, hover = [], [], []
    for parameter in parameters:
        name, choices = parameter.parameter, parameter.choices
        position = {_key(choice.value): i for i, choice in enumerate(choices)}
        shade.append([]), text.append([]), hover.append([])
        for fold in folds:
            chosen = _chosen(fold.params, name, choices, position)
            if chosen is None:  # no winner in this fold: the family failed there
                shade[-1].append(None), text[-1].append(""), hover[-1].append("no fold winner")
                continue
            i, label = chosen
            shade[-1].append(i / (len(choices) - 1) if len(choices) > 1 else 0.5)
            text[-1].append(escape(label if len(label) <= _TEXT_LIMIT else label[: _TEXT_LIMIT - 1] + "…"))
            hover[-1].append(escape(f"{name} = {label}"))
    figure = go.Figure(go.Heatmap(
        z=shade, x=columns, y=[escape(p.parameter.rsplit("__", 1)[-1]) for p in parameters],
        text=text, texttemplate="%{text}", customdata=hover, showscale=False, zmin=0, zmax=1, xgap=2, ygap=2,
        colorscale=[[0, _tint(colour, 0.12)], [1, _tint(colour, 0.85)]], hoverongaps=False,
        hovertemplate="%{customdata}<br>%{x}<extra></extra>"))
    figure = styled(figure, height=CHROME + ROW_HEIGHT * max(len(parameters), 1))
    figure.update_layout(margin={"l": 10, "r": 10, "t": 40, "b": 10})
    figure.update_xaxes(type="category", side="top", showgrid=False)
    figure.update_yaxes(type="category", autorange="reversed", automargin=True, showgrid=False)
    return figure_json(figure)


def _chosen(params: dict | None, name: str, choices: list[Choice], position: dict) -> tuple[int, str] | None:
    """The chosen value's position in the grid and its label; None when the fold has no winner."""
    if params is None:
        return None
    i = position.get(_key(params[name]) if name in params else _key(NOT_SET))
    return None if i is None else (i, choices[i].label)


def _key(value) -> str:
    return json.dumps(value, sort_keys=True)


def _tint(colour: str, alpha: float) -> str:
    red, green, blue = (int(colour[i:i + 2], 16) for i in (1, 3, 5))
    return f"rgba({red}, {green}, {blue}, {alpha})"
