"""Figures of the comparison pages: per-fold differences, the posterior of the mean difference, mean ranks."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import plotly.graph_objects as go
from scipy import stats

from foldwise.stats.paired import PairedResult, probability_text
from foldwise.web.charts.base import INK, MUTED, figure_json, styled
from foldwise.web.metric_display import metric_display

if TYPE_CHECKING:  # the page module imports this one
    from foldwise.web.fold_scores import FoldPair
    from foldwise.web.pages.assessments_compare import CandidatePairing, CandidateSummaries

_BAND = "rgba(91, 100, 112, 0.14)"  # the ROPE band and the critical-difference band, on every chart


def fold_differences_figure(folds: list[FoldPair], *, rope: float, names: tuple[str, str],
                            colours: tuple[str, str], metric: str) -> str:
    """Bars of a − b per outer fold (positive favours a), grouped by repeat, with the zero line and the ±ROPE band."""
    display = metric_display(metric)
    difference = display.difference(_short(names[0]), _short(names[1]))
    labels = [_fold_label(fold) for fold in folds]
    present = [fold for fold in folds if not math.isnan(fold.diff)]
    against = colours[1] if colours[1] != colours[0] else MUTED
    figure = go.Figure(go.Bar(
        x=[_fold_label(fold) for fold in present], y=[fold.diff for fold in present],
        marker_color=[colours[0] if fold.diff >= 0 else against for fold in present],
        customdata=[[fold.repeat, fold.outer_fold, display.value(fold.a), display.value(fold.b)]
                    for fold in present],
        hovertemplate=(f"repeat %{{customdata[0]}}, outer fold %{{customdata[1]}}<br>{_short(names[0])}: "
                       f"{display.name} %{{customdata[2]:.4f}}<br>{_short(names[1])}: {display.name} "
                       f"%{{customdata[3]:.4f}}<br>{difference} = %{{y:.4f}}<extra></extra>")))
    missing = [fold for fold in folds if math.isnan(fold.diff)]
    if missing:
        figure.add_scatter(x=[_fold_label(fold) for fold in missing], y=[0] * len(missing), mode="markers",
                           marker={"symbol": "x-thin-open", "size": 12, "color": MUTED, "line": {"width": 2}},
                           hovertemplate="no score here (a failed fit)<extra></extra>")
    shapes, annotations = _rope_band(rope, horizontal=True)
    shapes.append(_line("y", 0, {"color": INK, "width": 1}))
    shapes += [_line("x", position - 0.5, {"color": MUTED, "dash": "dot", "width": 1})
               for position in range(1, len(folds)) if folds[position].repeat != folds[position - 1].repeat]
    figure.update_layout(shapes=shapes, annotations=annotations)
    figure.update_xaxes(type="category", categoryorder="array", categoryarray=labels)
    styled(figure, x_title="outer fold (r = repeat, f = fold)", y_title=difference, height=340)
    return figure_json(figure)


def posterior_figure(result: PairedResult, *, rope: float, names: tuple[str, str], colours: tuple[str, str],
                     metric: str) -> str:
    """Density of the Student posterior of the mean difference a − b (positive favours a), ROPE shaded,
    probabilities labelled."""
    loc, scale, df = result.posterior_loc, result.posterior_scale, result.df
    figure = go.Figure()
    if scale > 0:
        low = min(stats.t.ppf(0.005, df, loc=loc, scale=scale), -1.5 * rope)
        high = max(stats.t.ppf(0.995, df, loc=loc, scale=scale), 1.5 * rope)
        edges = [value for value in (-rope, rope) if low <= value <= high]
        x = np.union1d(np.linspace(low, high, 401), edges)
        y = stats.t.pdf(x, df, loc=loc, scale=scale)
        for region, colour in ((x <= -rope, colours[1]), (np.abs(x) <= rope, MUTED), (x >= rope, colours[0])):
            figure.add_scatter(x=x[region], y=y[region], mode="lines", fill="tozeroy", line={"color": colour},
                               fillcolor=_tint(colour, 0.35), hovertemplate="d = %{x:.4f}<extra></extra>")
    else:
        figure.add_scatter(x=[loc, loc], y=[0, 1], mode="lines", line={"color": INK, "width": 3},
                           hovertemplate="all posterior mass at d = %{x:.4f}<extra></extra>")
        figure.update_yaxes(showticklabels=False)
    shapes, annotations = _rope_band(rope, horizontal=False)
    if scale <= 0:
        annotations.append({"x": loc, "y": 1, "text": "zero spread: the posterior is a point mass",
                            "showarrow": False, "yshift": 12})
    labels = ((0.0, "left", f"P({_short(names[1])} better) = {_probability(result.bayes_b)}"),
              (0.5, "center", f"P(practically equivalent) = {_probability(result.bayes_rope)}"),
              (1.0, "right", f"P({_short(names[0])} better) = {_probability(result.bayes_a)}"))
    annotations += [{"x": position, "xref": "paper", "y": 1.1, "yref": "paper", "xanchor": anchor, "text": text,
                     "showarrow": False} for position, anchor, text in labels]
    figure.update_layout(shapes=shapes, annotations=annotations)
    difference = metric_display(metric).difference(_short(names[0]), _short(names[1]))
    styled(figure, x_title=f"mean difference {difference}", y_title="density", height=360)
    figure.update_layout(margin={"t": 60})
    return figure_json(figure)


def ranks_figure(mean_ranks: dict, critical_difference: float, colours: dict[str, str]) -> str:
    """Mean ranks on one axis (1 = best), the CD drawn as a bar above and as a band from the best rank; no CD
    (NaN) when Friedman's test could not run, since Nemenyi's comparisons follow only from it."""
    order = sorted(mean_ranks, key=mean_ranks.get)
    best, k = mean_ranks[order[0]], len(order)
    figure = go.Figure(go.Scatter(
        x=[mean_ranks[family] for family in order], y=order, mode="markers+text",
        marker={"size": 14, "color": [colours[family] for family in order]},
        text=[f"{mean_ranks[family]:.2f}" for family in order], textposition="middle right",
        hovertemplate="%{y}: mean rank %{x:.3f}<extra></extra>"))
    drawn = math.isfinite(critical_difference)
    if drawn:
        figure.add_vrect(x0=best, x1=best + critical_difference, fillcolor=_BAND, line_width=0, layer="below")
        for x0, x1 in ((1, 1 + critical_difference), (1, 1), (1 + critical_difference, 1 + critical_difference)):
            bar = x0 != x1
            figure.add_shape(type="line", xref="x", yref="paper", x0=x0, x1=x1, y0=1.06 if bar else 1.03,
                             y1=1.06 if bar else 1.09, line={"color": INK, "width": 3 if bar else 2})
        figure.add_annotation(x=1 + critical_difference, xref="x", y=1.06, yref="paper", xanchor="left",
                              text=f"  CD = {critical_difference:.2f}", showarrow=False)
    figure.update_xaxes(range=[0.6, max(k, 1 + (critical_difference if drawn else 0)) + 0.5], dtick=1)
    figure.update_yaxes(type="category", autorange="reversed")
    styled(figure, x_title="mean rank over the outer folds (1 = best)", height=120 + 48 * k)
    figure.update_layout(margin={"t": 50, "l": 120})
    return figure_json(figure)


def paired_strips_figure(comparisons: list[CandidatePairing], *, rope: float, metric: str) -> str:
    """Per comparison of two assessments: each outer fold's difference x − y (positive favours x) as a point,
    the mean as a bar."""
    figure = go.Figure()
    usable = [c for c in comparisons if c.result is not None]
    for comparison in usable:
        diffs = [fold.diff for fold in comparison.folds if not math.isnan(fold.diff)]
        figure.add_scatter(x=diffs, y=[comparison.label] * len(diffs), mode="markers",
                           marker={"color": MUTED, "size": 9, "opacity": 0.8},
                           hovertemplate="fold difference %{x:.4f}<extra></extra>")
        figure.add_scatter(x=[comparison.result.mean_diff], y=[comparison.label], mode="markers",
                           marker={"color": INK, "size": 20, "symbol": "line-ns", "line": {"width": 3}},
                           hovertemplate="mean difference %{x:.4f}<extra></extra>")
    shapes, annotations = _rope_band(rope, horizontal=False)
    figure.update_layout(shapes=[*shapes, _line("x", 0, {"color": INK, "width": 1})], annotations=annotations)
    figure.update_yaxes(type="category", autorange="reversed")
    styled(figure, x_title=f"{metric_display(metric).difference('x', 'y')} per outer fold",
           height=110 + 46 * max(len(usable), 1))
    figure.update_layout(margin={"l": 220})
    return figure_json(figure)


def intervals_figure(summaries: list[CandidateSummaries], *, colours: dict[str, str], metric: str | None) -> str:
    """Mean and 95% interval of each candidate in each assessment, side by side (unpaired)."""
    display = metric_display(metric)
    figure = go.Figure()
    for side, symbol in (("x", "circle"), ("y", "diamond")):
        shown = [(row.candidate, summary) for row in summaries
                 if (summary := getattr(row, side)) is not None and not math.isnan(summary.mean)]
        means = [display.value(summary.mean) for _, summary in shown]
        spans = [display.span(summary.ci_low, summary.ci_high) for _, summary in shown]
        figure.add_scatter(
            x=[candidate for candidate, _ in shown], y=means, name=side,
            mode="markers", offsetgroup=side,
            marker={"symbol": symbol, "size": 12,
                    "color": [colours.get(candidate, INK) for candidate, _ in shown]},
            error_y={"type": "data", "symmetric": False, "color": MUTED,
                     "array": [_gap(high, mean) for (_, high), mean in zip(spans, means, strict=True)],
                     "arrayminus": [_gap(mean, low) for (low, _), mean in zip(spans, means, strict=True)]},
            hovertemplate=f"{side}: %{{x}}<br>mean {display.name} %{{y:.4f}}<extra></extra>")
    styled(figure, y_title=f"mean outer {display.label} ± 95% interval", height=360)
    figure.update_layout(scattermode="group", showlegend=True, legend={"title": {"text": "assessment"}})
    return figure_json(figure)


def _rope_band(rope: float, *, horizontal: bool) -> tuple[list[dict], list[dict]]:
    """The ±ROPE band and its label, as layout shapes and annotations.

    Given to the layout in one call with the other lines: plotly's add_hrect and add_vline each cost
    tens of milliseconds, which a page of 100 outer folds felt.
    """
    if rope <= 0:
        return [], []
    band = {"type": "rect", "fillcolor": _BAND, "line": {"width": 0}, "layer": "below"}
    label = {"text": f"ROPE ±{rope:g}", "showarrow": False}
    if horizontal:
        return ([band | {"xref": "paper", "x0": 0, "x1": 1, "yref": "y", "y0": -rope, "y1": rope}],
                [label | {"xref": "paper", "x": 0, "xanchor": "left", "yref": "y", "y": rope,
                          "yanchor": "bottom"}])
    return ([band | {"xref": "x", "x0": -rope, "x1": rope, "yref": "paper", "y0": 0, "y1": 1}],
            [label | {"xref": "x", "x": 0, "xanchor": "center", "yref": "paper", "y": 0, "yanchor": "bottom"}])


def _line(axis: str, at: float, line: dict) -> dict:
    """A line across the plot at ``at`` on ``axis`` ("x": vertical, "y": horizontal)."""
    across = "y" if axis == "x" else "x"
    return {"type": "line", "line": line, f"{axis}ref": axis, f"{axis}0": at, f"{axis}1": at,
            f"{across}ref": "paper", f"{across}0": 0, f"{across}1": 1}


def _fold_label(fold: FoldPair) -> str:
    return f"r{fold.repeat}·f{fold.outer_fold}"


def _short(name: str, limit: int = 28) -> str:
    return name if len(name) <= limit else name[: limit - 1] + "…"


def _probability(p: float) -> str:
    return probability_text(p)  # as the verdict and the cards write it


def _gap(high: float, low: float) -> float | None:
    return None if math.isnan(high) or math.isnan(low) else high - low


def _tint(colour: str, alpha: float) -> str:
    red, green, blue = (int(colour[i:i + 2], 16) for i in (1, 3, 5))
    return f"rgba({red}, {green}, {blue}, {alpha})"
