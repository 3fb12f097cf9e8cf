"""Families ranked on each outer fold of one assessment: Friedman's test, Nemenyi's critical difference."""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.stats.ranking import rank_families, ranking_verdict
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.answers import Ranking
from foldwise.web.charts.comparison import ranks_figure
from foldwise.web.errors import error_responses
from foldwise.web.fold_scores import family_fold_scores
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.serialise import plain, records

router = APIRouter()


@dataclass(frozen=True)
class RankingContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    colours: dict[str, str]
    result: dict  # RankingResult's fields, JSON-safe; critical_difference None when Friedman's test cannot run
    verdict: str  # the ranking in one sentence
    rows: list[dict]  # per family, best mean rank first: family, mean_rank, and its outer-score summary
    blocks: list[dict]  # per outer fold: repeat, outer_fold and each family's fold winner's outer score
    ranks_figure: str


def ranking_context(reader: AssessmentReader, *, metric: str | None) -> RankingContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    families = [family.name for family in record.families]
    outer = reader.outer(metric=metric, winners="family")
    scores = family_fold_scores(outer, metric, families, folds=reader.fold_sizes().index)
    try:
        ranking = rank_families(scores)
    except ValueError as error:
        raise HTTPException(422, f"cannot rank the families {families} on {metric!r}: {error}") from None
    table = frames.family_summary(outer, metric, families=record.family_names, n_folds=record.n_folds)
    summary = {row["family"]: row for row in records(table)}
    rows = [{"family": family, "mean_rank": rank, **{key: summary.get(family, {}).get(key)
                                                     for key in ("mean", "sd", "n")}}
            for family, rank in sorted(ranking.mean_ranks.items(), key=lambda item: item[1])]
    colours = family_colours(families)
    result = {key: plain(getattr(ranking, key)) for key in
              ("friedman_stat", "friedman_p", "critical_difference", "n_blocks", "n_missing", "note")}
    if result["friedman_p"] is None:  # Nemenyi's comparisons follow Friedman's test: no test, no CD
        result["critical_difference"] = None
    return RankingContext(
        record=record, metric=metric, metrics=record.design.metrics, colours=colours,
        result=result | {"mean_ranks": ranking.mean_ranks}, verdict=ranking_verdict(ranking),
        rows=rows, blocks=records(scores.reset_index()),
        ranks_figure=ranks_figure(ranking.mean_ranks, result["critical_difference"], colours))


@router.get("/assessments/{uuid}/ranking", name="ranking", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def ranking(request: Request, reader: ReaderDep, metric: str | None = None):
    return form_page(request, "ranking.html", lambda metric: ranking_context(reader, metric=metric),
                     {"metric": metric})


@router.get("/api/assessments/{uuid}/ranking", name="ranking_json", response_model=Ranking,
            responses=error_responses(404, 422))
def ranking_json(reader: ReaderDep, metric: str | None = None):
    """Friedman's test over the outer folds, mean ranks (1 = best) and Nemenyi's critical difference."""
    page = ranking_context(reader, metric=metric)
    return {"uuid": page.record.uuid, "metric": page.metric, **page.result, "verdict": page.verdict,
            "families": page.rows, "blocks": page.blocks}
