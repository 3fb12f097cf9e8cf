"""How a metric reads on a page: its own name, its orientation, and the sign scikit-learn gave it.

scikit-learn's scorers are all "greater is better", so a loss is stored negated: a root mean squared
error of 7.865 is scored ``neg_root_mean_squared_error = -7.865``. The store and the JSON API keep that
orientation (what scikit-learn and a script expect); every page and chart shows the loss as itself
("RMSE 7.865, lower is better"). This module is the one place that decides it:

- a level (a score, a mean, a bound, a minimum) is flipped back for a negated metric, and the two ends
  of a range swap;
- a spread (a standard deviation) has no sign and is shown as it is;
- a difference keeps its sign, because every difference foldwise shows is oriented "positive favours
  the first" (a − b on scikit-learn's scores, optimism = inner mean − outer score); what changes is how
  it is spelled: for RMSE, a − b on the scores is RMSE(b) − RMSE(a).
"""

from __future__ import annotations

import functools
import json
import math
from dataclasses import dataclass

NEGATED_PREFIX = "neg_"  # scikit-learn's convention for a loss turned into a "greater is better" score

# Short names for scikit-learn's negated losses (its scoring names, sklearn.metrics.get_scorer_names());
# any other neg_* metric reads as its name without the prefix.
_LOSS_NAMES = {
    "neg_root_mean_squared_error": "RMSE",
    "neg_mean_squared_error": "MSE",
    "neg_mean_absolute_error": "MAE",
    "neg_median_absolute_error": "median absolute error",
    "neg_mean_absolute_percentage_error": "MAPE",
    "neg_mean_squared_log_error": "MSLE",
    "neg_root_mean_squared_log_error": "RMSLE",
    "neg_max_error": "max error",
    "neg_mean_poisson_deviance": "Poisson deviance",
    "neg_mean_gamma_deviance": "gamma deviance",
    "neg_log_loss": "log loss",
    "neg_brier_score": "Brier score",
    "neg_negative_likelihood_ratio": "negative likelihood ratio",
}

API_ORIENTATION = ("Numbers are in scikit-learn's orientation, greater is better: a metric named neg_* is a loss "
                   "stored negated (RMSE 7.865 is neg_root_mean_squared_error = -7.865); the pages show it "
                   "positive under its own name. Differences are oriented so that positive favours the first.")


@dataclass(frozen=True)
class MetricDisplay:
    metric: str  # the scoring name as recorded (scikit-learn's), e.g. "neg_root_mean_squared_error"
    name: str  # what a page calls it, e.g. "RMSE"
    negated: bool  # stored as −loss: every level is flipped back on a page

    @property
    def direction(self) -> str:
        return "lower is better" if self.negated else "higher is better"

    @property
    def label(self) -> str:
        """The name with its orientation, for an axis title or a heading: "RMSE (lower is better)"."""
        return f"{self.name} ({self.direction})"

    @property
    def stored_as(self) -> str:
        """What the API and the CSV files hold, for a tooltip or a note beside a download link."""
        if not self.negated:
            return f"stored and served as {self.metric}"
        return f"stored and served by the API as {self.metric} = −{self.name} (scikit-learn's sign)"

    def value(self, score):
        """A level as shown: the loss itself for a negated metric; None and NaN stay as they are."""
        if score is None or not self.negated or (isinstance(score, float) and math.isnan(score)):
            return score
        return -score

    def span(self, low, high) -> tuple:
        """A range (min – max, an interval) as shown, low end first."""
        if not self.negated:
            return low, high
        return self.value(high), self.value(low)

    def difference(self, first: str, second: str) -> str:
        """How a − b on the scores reads, in the metric's own terms (still positive when a is better)."""
        if not self.negated:
            return f"{first} − {second}"
        return f"{self.name}({second}) − {self.name}({first})"

    @property
    def optimism_formula(self) -> str:
        """Optimism in the metric's own terms: positive when the inner folds flattered the fold winner."""
        if not self.negated:
            return "inner mean − outer score"
        return f"outer {self.name} − inner mean {self.name}"


@functools.cache
def metric_display(metric: str | None) -> MetricDisplay:
    """How ``metric`` reads; no metric at all (a page before one is chosen) reads as a plain score."""
    if not metric:
        return MetricDisplay(metric="", name="score", negated=False)
    if metric.startswith(NEGATED_PREFIX) and len(metric) > len(NEGATED_PREFIX):
        name = _LOSS_NAMES.get(metric, metric.removeprefix(NEGATED_PREFIX).replace("_", " "))
        return MetricDisplay(metric=metric, name=name, negated=True)
    return MetricDisplay(metric=metric, name=metric, negated=False)


def displays_json(metrics: list[str]) -> str:
    """How each of ``metrics`` reads, as JSON for the charts and numbers static/ensemble.js draws."""
    return json.dumps({metric: {"name": shown.name, "negated": shown.negated, "label": shown.label}
                       for metric, shown in ((metric, metric_display(metric)) for metric in metrics)})
