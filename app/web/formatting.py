"""Jinja filters and tests: how numbers, designs and parameters read on a page (a metric's sign: metric_display)."""

from __future__ import annotations

import math
import numbers

from markupsafe import Markup

from foldwise.stats.paired import probability_text
from foldwise.web.metric_display import metric_display

CAUTION = ("A cross-validated estimate describes the data at hand. A model used on patients, credit or "
           "safety needs external validation and must follow local regulation and licensed practice.")


def score(value, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:.{digits}f}"


def probability(value) -> str:
    """A posterior probability as the comparison's verdict writes it (``probability_text``), so card and
    sentence agree digit for digit."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return probability_text(value)


def shown(value, metric: str, digits: int = 3) -> str:
    """A level of ``metric`` as a page shows it: a negated loss (neg_*) flipped back to the loss itself."""
    return score(metric_display(metric).value(value), digits)


def shown_span(low, high, metric: str, digits: int = 3, joiner: str = " – ") -> str:
    """A range of ``metric`` (min – max, an interval) as shown, low end first; "–" when undefined."""
    low, high = metric_display(metric).span(low, high)
    if not (finite(low) and finite(high)):
        return "–"
    return f"{score(low, digits)}{joiner}{score(high, digits)}"


def design_text(n_outer: int, n_inner: int, n_repeats: int) -> str:
    text = f"{n_outer} outer × {n_inner} inner"
    return text + (f", {n_repeats} repeats" if n_repeats > 1 else "")


def params_text(params: dict) -> str:
    if not params:
        return "defaults"
    return ", ".join(f"{key.rsplit('__', 1)[-1]}={value}" for key, value in params.items())


def seconds(value: float) -> str:
    if value < 60:
        return f"{value:.1f} s"
    if value < 3600:
        return f"{value / 60:.1f} min"
    return f"{value / 3600:.1f} h"


def json_script(text: str) -> Markup:
    """JSON text safe inside <script type="application/json">: no way to close the tag early."""
    escaped = text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
    return Markup(escaped.replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))


def finite(value) -> bool:
    """``{% if x is finite %}``: a number that can be shown as one (not None, NaN or ±inf); statistic results
    reach the templates as computed, NaN and inf included."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)


TESTS = {"finite": finite}

FILTERS = {"score": score, "probability": probability, "shown": shown, "shown_span": shown_span,
           "params_text": params_text, "seconds": seconds,
           "json_script": json_script}
