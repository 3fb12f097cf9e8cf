"""How an ``Assessment`` shows itself: one line as text, a compact summary as HTML in a notebook."""

from __future__ import annotations

import html
import math

import pandas as pd

_MAX_WINNER_ROWS = 20  # a notebook cell, not a page: the dashboard shows every fold


def design_text(design) -> str:
    repeats = f"{design.n_repeats} repeats × " if design.n_repeats > 1 else ""
    return f"{repeats}{design.n_outer_folds} outer × {design.n_inner_folds} inner"


def text_repr(assessment) -> str:
    payload, estimate = assessment.payload, assessment.nested_estimate
    return (f"<Assessment {payload.name!r}: {design_text(payload.design)}, {len(payload.configurations)} "
            f"configurations; nested estimate {assessment.selection_metric} {_number(estimate.mean)}"
            f"{_sd(estimate.sd)} {estimate.described}>")


def html_repr(assessment) -> str:
    payload, estimate = assessment.payload, assessment.nested_estimate
    design, metric = payload.design, assessment.selection_metric
    families = ", ".join(family.name for family in payload.families)
    head = (f"<p><strong>{_e(payload.name)}</strong>{' · ' + _e(payload.dataset) if payload.dataset else ''} · "
            f"{design.task}, {design.n_samples} rows · {_e(design_text(design))} · "
            f"{len(payload.configurations)} configurations in {len(payload.families)} families "
            f"({_e(families)})</p>")
    nested = (f"<p>Nested estimate of <code>{_e(metric)}</code>: <strong>{_number(estimate.mean)}</strong>"
              f"{_sd(estimate.sd)} {_e(estimate.described)} (± is the sd of the fold winners' outer scores)</p>")
    summary = assessment.summary().rename(columns={"n": "folds used", "n_failed": "folds failed"})
    winners = assessment.winners[["repeat", "outer_fold", "family", "config", "inner_mean", "outer_score",
                                  "optimism"]]
    more = len(winners) - _MAX_WINNER_ROWS
    tail = f"<p>… and {more} more outer folds.</p>" if more > 0 else ""
    failures = (f"<p>{len(payload.failures)} fits failed; <code>assessment.failures</code> lists them.</p>"
                if payload.failures else "")
    return (f'<div class="foldwise-assessment">{head}{nested}<p>Families (outer scores of their fold winners)</p>'
            f"{_table(summary)}<p>Fold winners</p>{_table(winners.head(_MAX_WINNER_ROWS))}{tail}{failures}</div>")


def _table(frame: pd.DataFrame) -> str:
    return frame.to_html(index=False, escape=True, float_format=lambda value: f"{value:.4f}", na_rep="–",
                         border=0)


def _number(value: float) -> str:
    return "–" if value is None or math.isnan(value) else f"{value:.4f}"


def _sd(value: float) -> str:
    return "" if value is None or math.isnan(value) else f" ± {value:.4f}"


def _e(text) -> str:
    return html.escape(str(text))
