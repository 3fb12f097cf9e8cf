"""One assessment: its headline (the nested estimate with its interval beside the non-nested best inner
score), design, each family's outer scores, the fold winners and what to ship."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd
from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.definitions import nested_estimate
from foldwise.store import AssessmentReader, AssessmentRecord, EnsembleRecord
from foldwise.web.errors import error_responses
from foldwise.web.failed_fits import FailedFit, failed_fits
from foldwise.web.formatting import design_text
from foldwise.web.forms import form_page
from foldwise.web.headline import Headline, headline
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.shipping import Shipping, shipping
from foldwise.web.winner_rows import FoldWinner, fold_winner_rows

router = APIRouter()

_FAILURES_SHOWN = 20  # the first failures listed on the page; the count says how many there are


@dataclass(frozen=True)
class FoldRow:
    repeat: int
    outer_fold: int
    overall: FoldWinner
    by_family: dict[str, FoldWinner]  # by family name; a family with no winner in this fold is absent


@dataclass(frozen=True)
class FamilySummaryRow:
    """A family's fold winners' outer scores over the outer folds (definitions.family_summary); NaN where
    undefined."""

    family: str
    mean: float
    sd: float
    min: float
    max: float
    n: int  # outer folds used
    n_failed: int  # outer folds without a score


@dataclass(frozen=True)
class EstimateSummary:
    """The nested estimate as the page states it: mean and sd (NaN where undefined), the range of the
    overall fold winners' outer scores, the outer folds used of the design's, and that said in words."""

    mean: float
    sd: float
    min: float
    max: float
    n: int
    n_folds: int
    n_failed: int
    described: str


@dataclass(frozen=True)
class AssessmentContext:
    record: AssessmentRecord
    design: str
    metric: str
    metrics: list[str]
    estimate: EstimateSummary
    summary: list[FamilySummaryRow]  # best mean first
    families: list[str]
    colours: dict[str, str]
    folds: list[FoldRow]
    failures: list[FailedFit]  # the first _FAILURES_SHOWN; n_failures counts them all
    n_failures: int
    ensembles: list[EnsembleRecord]  # saved ensembles of this assessment, oldest first
    headline: Headline  # nested estimate and interval beside the non-nested best inner score, on `metric`
    shipping: Shipping  # the final choice beside the fold winners (selection metric); the ensemble follows


def assessment_context(reader: AssessmentReader, *, metric: str | None) -> AssessmentContext:
    record = reader.record
    metric, metrics = metric_or_422(record, metric), record.design.metrics
    # The fold winners' rows only: the inner means come from the summaries stored with the assessment.
    overall = reader.winners(kind="overall", metric=metric)
    per_family = reader.winners(kind="family", metric=metric)
    outer = reader.outer(metric=metric, winners="family")
    by_fold: dict[tuple[int, int], dict[str, FoldWinner]] = {}
    for row in fold_winner_rows(per_family):
        by_fold.setdefault((row.repeat, row.outer_fold), {})[row.family] = row
    folds, seen = [], set()
    for row in fold_winner_rows(overall):  # sorted by (repeat, outer_fold); the first row of a fold is its winner
        key = (row.repeat, row.outer_fold)
        if key not in seen:
            seen.add(key)
            folds.append(FoldRow(*key, row, by_fold.get(key, {})))
    scores = overall["outer_score"]
    nested = nested_estimate(scores.to_numpy(dtype=float), n_folds=record.n_folds)
    estimate = EstimateSummary(mean=nested.mean, sd=nested.sd, min=float(scores.min()),
                               max=float(scores.max()), n=nested.n_used, n_folds=nested.n_folds,
                               n_failed=nested.n_failed, described=nested.described)
    failures = reader.failures(limit=_FAILURES_SHOWN)
    design, families = record.design, [family.name for family in record.families]
    summary = frames.family_summary(outer, metric, families=families, n_folds=record.n_folds)
    final = reader.final_selection()
    selecting = overall if metric == design.selection_metric else reader.winners(kind="overall")
    return AssessmentContext(
        record=record, design=design_text(design.n_outer_folds, design.n_inner_folds, design.n_repeats),
        metric=metric, metrics=metrics, estimate=estimate, summary=_summary_rows(summary), families=families,
        colours=family_colours(families), folds=folds, failures=failed_fits(failures),
        n_failures=record.n_failures, ensembles=reader.ensembles(),
        headline=headline(record, metric=metric, winners=overall, sizes=reader.fold_sizes(),
                          summary=summary, family_outer=outer, final=final),
        shipping=shipping(record, selecting, final))


def _summary_rows(summary: pd.DataFrame) -> list[FamilySummaryRow]:
    return [FamilySummaryRow(family=row["family"], mean=float(row["mean"]), sd=float(row["sd"]),
                             min=float(row["min"]), max=float(row["max"]), n=int(row["n"]),
                             n_failed=int(row["n_failed"]))
            for row in summary.to_dict(orient="records")]


@router.get("/assessments/{uuid}", name="assessment_detail", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def assessment_detail(request: Request, reader: ReaderDep, metric: str | None = None):
    return form_page(request, "assessment_detail.html", lambda metric: assessment_context(reader, metric=metric),
                     {"metric": metric})
