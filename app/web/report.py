"""A report of one assessment for a reviewer: one self-contained HTML file, readable anywhere, printable.

Everything in it comes from the assessment itself and ``foldwise.definitions`` (the nested estimate, the
family summaries, the fold winners, optimism), so its numbers are the dashboard's. It holds no script and
loads nothing: styles are inline and the one chart is SVG drawn here, so the file opens without a network
and prints as it reads. Its sections follow what reporting guidelines for prediction models ask of an
internal validation: how the data were resampled, how tuning was kept inside the resampling, the
performance measures with their uncertainty, and what was finally chosen.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
import pandas as pd
from fastapi import APIRouter
from fastapi.responses import HTMLResponse
from jinja2 import Environment, FileSystemLoader, select_autoescape

import foldwise
from foldwise import definitions
from foldwise.assessment import Assessment
from foldwise.stats.paired import PairedResult, compare_paired
from foldwise.web.fold_scores import family_fold_scores, fold_sizes
from foldwise.web.formatting import CAUTION, FILTERS, params_text
from foldwise.web.lookup import ReaderDep
from foldwise.web.metric_display import metric_display
from foldwise.web.resources import templates_dir
from foldwise.web.shipping import FinalSummary, final_summary

router = APIRouter()


@dataclass(frozen=True)
class FamilyRow:
    family: str
    estimator: str
    n_configs: int
    grid: str
    mean: float
    sd: float
    min: float
    max: float
    n: int
    n_failed: int


@dataclass(frozen=True)
class WinnerRow:
    repeat: int
    outer_fold: int
    family: str
    params: str
    inner_mean: float
    outer_score: float
    optimism: float


@dataclass(frozen=True)
class Comparison:
    """The best family (a) against the runner-up (b) on the same outer folds."""

    a: str
    b: str
    rope: float
    result: PairedResult


@dataclass(frozen=True)
class ReportContext:
    title: str
    dataset: str | None
    created_at: str
    generated_at: str
    version: str
    caution: str
    metric: str
    methods: list[str]
    estimate: definitions.NestedEstimate
    optimism: definitions.NestedEstimate  # the mean optimism over the folds where it exists
    families: list[FamilyRow]
    winners: list[WinnerRow]
    comparison: Comparison | None
    final: FinalSummary | None
    failures: list[tuple[int, str]]  # count, message
    n_failures: int
    chart: str  # inline SVG
    versions: dict[str, str]


def report_context(assessment: Assessment, *, rope: float = 0.01,
                   generated_at: datetime | None = None) -> ReportContext:
    payload = assessment.payload
    design, metric = payload.design, assessment.selection_metric
    summary = assessment.summary()
    winners = assessment.winners
    optimism = definitions.nested_estimate(winners["optimism"].to_numpy(dtype=float),
                                           n_folds=design.n_repeats * design.n_outer_folds)
    return ReportContext(
        title=payload.name, dataset=payload.dataset, created_at=_time(payload.created_at),
        generated_at=_time(generated_at or datetime.now(UTC)), version=foldwise.__version__, caution=CAUTION,
        metric=metric, methods=_methods(assessment), estimate=assessment.nested_estimate, optimism=optimism,
        families=_families(assessment, summary), winners=_winners(winners), comparison=_comparison(
            assessment, summary, rope=rope), final=_final(assessment), failures=_failures(assessment),
        n_failures=len(payload.failures), chart=_strip_chart(assessment, summary), versions=payload.versions)


def report_html(assessment: Assessment, **options) -> str:
    """The report as one HTML document (see the module docstring)."""
    environment = Environment(loader=FileSystemLoader(str(templates_dir())), autoescape=select_autoescape())
    environment.filters.update(FILTERS)
    environment.globals.update(metric_display=metric_display)
    return environment.get_template("report.html").render(page=report_context(assessment, **options))


@router.get("/assessments/{uuid}/report", name="assessment_report", include_in_schema=False)
def assessment_report(reader: ReaderDep):
    """The report as a download: the whole assessment is read, so it is made on request, not on every visit."""
    payload = reader.payload()
    return HTMLResponse(report_html(Assessment(payload)), headers={
        "content-disposition": f'attachment; filename="foldwise-report-{payload.uuid}.html"'})


def _methods(assessment: Assessment) -> list[str]:
    payload = assessment.payload
    design = payload.design
    n_configs = len(payload.configurations)
    repeats = (f"repeated {design.n_repeats} times with different splits, " if design.n_repeats > 1 else "")
    grouped = " Rows of one group were kept on one side of every split." if design.grouped else ""
    metrics = ", ".join(design.metrics)
    families = "; ".join(f"{family.name} ({family.estimator_class or family.estimator or 'estimator'}, "
                         f"{sum(c.family == family.name for c in payload.configurations)} configurations)"
                         for family in payload.families)
    texts = [
        f"The {design.task} task used {design.n_samples} rows"
        + (f" and {design.n_features} features" if design.n_features is not None else "") + ". "
        f"Model selection and its assessment were done by nested cross-validation: an outer loop of "
        f"{design.n_outer_folds} folds ({design.outer_splitter or 'splitter not recorded'}), {repeats}"
        f"and within each outer training set an inner loop of {design.n_inner_folds} folds "
        f"({design.inner_splitter or 'splitter not recorded'}).{grouped}",
        f"{n_configs} configurations in {len(payload.families)} families were compared: {families}. Each was "
        f"scored on every inner fold by {metrics}. Tuning stayed inside the inner loop: in each outer fold, "
        f"{design.metrics[0]} chose within each family the configuration with the greatest mean inner score "
        f"(a configuration with a failed inner fit never wins; ties go to the first in grid order), and "
        f"the best family's winner was refit on the whole outer training set and scored once on the outer "
        f"test fold, which the selection never saw.",
        "The nested estimate is the mean of those outer scores: it describes the whole procedure (select, "
        "then refit) at this sample size, not one configuration. Optimism is a fold winner's mean inner "
        "score minus its outer score: how much the inner loop flattered what it chose.",
    ]
    if payload.final is not None:
        texts.append(f"The model to ship is that procedure run once more on all {design.n_samples} rows: the "
                     f"same inner splitter ({payload.final.inner_splitter}) over every row, the same rule, "
                     "and the winner refit on every row.")
    software = ", ".join(f"{name} {version}" for name, version in sorted(payload.versions.items()))
    texts.append(f"Software: {software or 'versions not recorded'}.")
    return texts


def _families(assessment: Assessment, summary: pd.DataFrame) -> list[FamilyRow]:
    payload = assessment.payload
    by_name = {family.name: family for family in payload.families}
    rows = []
    for row in summary.itertuples():
        configs = [c for c in payload.configurations if c.family == row.family]
        grid: dict[str, list] = {}
        for config in configs:
            for key, value in config.params.items():
                grid.setdefault(key.rsplit("__", 1)[-1], [])
                if value not in grid[key.rsplit("__", 1)[-1]]:
                    grid[key.rsplit("__", 1)[-1]].append(value)
        family = by_name[row.family]
        rows.append(FamilyRow(
            family=row.family, estimator=family.estimator_class or family.estimator, n_configs=len(configs),
            grid="; ".join(f"{key} ∈ {{{', '.join(map(str, values))}}}" for key, values in grid.items())
            or "defaults", mean=row.mean, sd=row.sd, min=row.min, max=row.max, n=row.n, n_failed=row.n_failed))
    return rows


def _winners(winners: pd.DataFrame) -> list[WinnerRow]:
    return [WinnerRow(repeat=int(row.repeat), outer_fold=int(row.outer_fold), family=row.family,
                      params=params_text(row.params), inner_mean=row.inner_mean, outer_score=row.outer_score,
                      optimism=row.optimism) for row in winners.itertuples()]


def _comparison(assessment: Assessment, summary: pd.DataFrame, *, rope: float) -> Comparison | None:
    """The best family against the runner-up, on the same outer folds, by the corrected tests."""
    ranked = summary.dropna(subset=["mean"])["family"].tolist()
    if len(ranked) < 2:
        return None
    a, b = ranked[:2]
    outer = assessment.outer_scores
    scores = family_fold_scores(outer, assessment.selection_metric, [a, b])
    sizes = fold_sizes(outer).reindex(scores.index)
    try:
        result = compare_paired(scores[a].to_numpy(), scores[b].to_numpy(), n_train=sizes["n_train"].to_numpy(),
                                n_test=sizes["n_test"].to_numpy(), rope=rope, names=(a, b))
    except ValueError:  # too few folds where both have a score: the table says so by its counts
        return None
    return Comparison(a=a, b=b, rope=rope, result=result)


def _final(assessment: Assessment) -> FinalSummary | None:
    choice = assessment.final_choice
    if choice is None:
        return None
    return final_summary(choice.family, choice.config, choice.params, assessment.winners)


def _failures(assessment: Assessment) -> list[tuple[int, str]]:
    counts = Counter(failure.message.splitlines()[-1][:300] for failure in assessment.payload.failures)
    return [(count, message) for message, count in counts.most_common(10)]


def _time(moment: datetime) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC") if moment.tzinfo else \
        moment.strftime("%Y-%m-%d %H:%M")


def _strip_chart(assessment: Assessment, summary: pd.DataFrame) -> str:
    """Each family's fold winners' outer scores as points on one line per family, the mean as a bar."""
    outer = assessment.outer_scores
    rows = outer[(outer["metric"] == assessment.selection_metric) & outer["family_winner"]]
    display = metric_display(assessment.selection_metric)  # a negated loss is drawn as the loss itself
    families = summary["family"].tolist()
    values = display.value(rows["score"].to_numpy(dtype=float))
    finite = values[np.isfinite(values)]
    width, left, right, line = 640, 170, 20, 28
    height = 40 + line * len(families)
    if finite.size == 0:
        return ""
    low, high = float(finite.min()), float(finite.max())
    pad = (high - low) * 0.05 or 0.01
    low, high = low - pad, high + pad

    def x(value: float) -> float:
        return left + (value - low) / (high - low) * (width - left - right)

    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" role="img" '
             f'aria-label="outer scores of each family\'s fold winners" class="strip">']
    for tick in np.linspace(low + pad, high - pad, 5):
        parts.append(f'<line x1="{x(tick):.1f}" y1="10" x2="{x(tick):.1f}" y2="{height - 24}" class="grid"/>'
                     f'<text x="{x(tick):.1f}" y="{height - 8}" class="tick">{tick:.3f}</text>')
    for position, row in enumerate(summary.itertuples()):
        y = 24 + line * position
        parts.append(f'<text x="{left - 10}" y="{y + 4}" class="label">{_escape(row.family)}</text>')
        for value in display.value(rows.loc[rows["family"] == row.family, "score"].to_numpy(dtype=float)):
            if math.isfinite(value):
                parts.append(f'<circle cx="{x(value):.1f}" cy="{y}" r="4" class="point"/>')
        mean = display.value(row.mean)
        if math.isfinite(mean):
            parts.append(f'<line x1="{x(mean):.1f}" y1="{y - 9}" x2="{x(mean):.1f}" y2="{y + 9}" class="mean"/>')
    parts.append("</svg>")
    return "".join(parts)


def _escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;")
