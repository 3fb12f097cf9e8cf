"""One assessment: its design, nested estimate, each family's outer scores and the fold winners."""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import APIRouter, Request

from foldwise import frames
from foldwise.store import AssessmentRecord, failures_for, inner_scores_for, outer_scores_for
from foldwise.web.formatting import design_text
from foldwise.web.lookup import metric_or_422, record_or_404
from foldwise.web.palette import family_colours
from foldwise.web.serialise import plain, records

router = APIRouter()


@dataclass(frozen=True)
class FoldRow:
    repeat: int
    outer_fold: int
    overall: dict  # the overall winner's row of winners_frame
    by_family: dict[str, dict]  # family -> its winner's row in this fold


@dataclass(frozen=True)
class AssessmentContext:
    record: AssessmentRecord
    design: str
    metric: str
    metrics: list[str]
    estimate: dict  # mean, sd, min, max of the overall winners' outer scores
    summary: list[dict]
    families: list[str]
    colours: dict[str, str]
    folds: list[FoldRow]
    failures: list[dict]
    n_failures: int


def assessment_context(engine, uuid: str, *, metric: str | None) -> AssessmentContext:
    record = record_or_404(engine, uuid)
    metric, metrics = metric_or_422(record, metric), record.design.metrics
    inner, outer = inner_scores_for(engine, uuid), outer_scores_for(engine, uuid)
    overall = frames.winners_frame(inner, outer, metric)
    per_family = frames.winners_frame(inner, outer, metric, flag="family_winner")
    folds = []
    for (repeat, outer_fold), row in overall.groupby(["repeat", "outer_fold"], sort=True):
        mine = per_family[(per_family["repeat"] == repeat) & (per_family["outer_fold"] == outer_fold)]
        folds.append(FoldRow(int(repeat), int(outer_fold), records(row)[0],
                             {r["family"]: r for r in records(mine)}))
    scores = overall["outer_score"]
    estimate = {"mean": plain(scores.mean()), "sd": plain(scores.std()), "min": plain(scores.min()),
                "max": plain(scores.max()), "n": int(scores.count())}
    failures = failures_for(engine, uuid)
    design, families = record.design, [family.name for family in record.families]
    return AssessmentContext(
        record=record, design=design_text(design.n_outer_folds, design.n_inner_folds, design.n_repeats),
        metric=metric, metrics=metrics, estimate=estimate,
        summary=records(frames.family_summary(outer, metric)), families=families,
        colours=family_colours(families), folds=folds, failures=records(failures.head(20)),
        n_failures=len(failures))


@router.get("/assessments/{uuid}", name="assessment_detail")
def assessment_detail(request: Request, uuid: str, metric: str | None = None):
    context = assessment_context(request.app.state.engine, uuid, metric=metric)
    return request.app.state.templates.TemplateResponse(request, "assessment_detail.html", {"page": context})
