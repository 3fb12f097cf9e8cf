"""Families ranked on each outer fold of one assessment: Friedman's test, Nemenyi's critical difference."""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.stats.ranking import RankingResult, rank_families, ranking_verdict
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.answers import Ranking
from foldwise.web.charts.comparison import ranks_figure
from foldwise.web.context_json import context_json
from foldwise.web.errors import error_responses
from foldwise.web.fold_scores import family_fold_scores
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.serialise import plain, records

router = APIRouter()


@dataclass(frozen=True)
class RankedFamily:
    """One family's mean rank beside the summary of its fold winners' outer scores."""

    family: str
    mean_rank: float
    mean: float  # NaN when no fold winner of the family has an outer score
    sd: float
    n: int  # outer folds scored


@dataclass(frozen=True)
class RankingContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    colours: dict[str, str]
    result: RankingResult
    verdict: str  # the ranking in one sentence
    rows: list[RankedFamily]  # best mean rank first
    blocks: list[dict]  # one table row per outer fold: repeat, outer_fold, then one column per family
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
    # Every family has a row, NaN where none of its fold winners has a score (definitions.family_summary).
    summary = frames.family_summary(outer, metric, families=record.family_names,
                                    n_folds=record.n_folds).set_index("family")
    rows = [RankedFamily(family=family, mean_rank=rank, mean=float(summary.at[family, "mean"]),
                         sd=float(summary.at[family, "sd"]), n=int(summary.at[family, "n"]))
            for family, rank in sorted(ranking.mean_ranks.items(), key=lambda item: item[1])]
    colours = family_colours(families)
    return RankingContext(
        record=record, metric=metric, metrics=record.design.metrics, colours=colours, result=ranking,
        verdict=ranking_verdict(ranking), rows=rows, blocks=records(scores.reset_index()),
        ranks_figure=ranks_figure(ranking.mean_ranks, ranking.tested_critical_difference, colours))


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
    result = page.result
    return {"uuid": page.record.uuid, "metric": page.metric, "friedman_stat": plain(result.friedman_stat),
            "friedman_p": plain(result.friedman_p), "critical_difference": plain(result.tested_critical_difference),
            "n_blocks": result.n_blocks, "n_missing": result.n_missing, "note": result.note,
            "mean_ranks": result.mean_ranks, "verdict": page.verdict,
            "families": [context_json(row) for row in page.rows], "blocks": page.blocks}
