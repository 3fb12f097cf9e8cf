"""Fold winners: a repeat × outer fold grid of the chosen configurations, and how stable the choices were."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

import pandas as pd
from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from foldwise.payload import Configuration
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.stability import NOT_SET, parameter_strip_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.winner_rows import FoldWinner, fold_winner_rows

router = APIRouter()


@dataclass(frozen=True)
class FamilyWinner:
    family: str
    winner: FoldWinner | None  # None when every configuration of the family failed in this outer fold


@dataclass(frozen=True)
class WinnerCell:
    repeat: int
    outer_fold: int
    overall: FoldWinner | None
    by_family: list[FamilyWinner]  # in the assessment's order


@dataclass(frozen=True)
class Choice:
    """One value of a parameter in the family's grid, and how often the fold winners chose it."""

    value: Any  # as in the grid; NOT_SET for a grid point that leaves the parameter at its default
    label: str
    count: int
    share: float  # count over the outer folds with a winner; NaN when there is none


@dataclass(frozen=True)
class ParameterChoices:
    parameter: str
    choices: list[Choice]  # in grid order


@dataclass(frozen=True)
class FoldPick:
    """The family's fold winner in one outer fold; config and params None when it had none."""

    repeat: int
    outer_fold: int
    config: str | None
    params: dict[str, Any] | None


@dataclass(frozen=True)
class FamilyStability:
    family: str
    n_folds: int  # outer folds (over repeats) in which the family had a winner
    parameters: list[ParameterChoices]  # in grid order
    by_fold: list[FoldPick]  # every outer fold, in order
    strip_figure: str


@dataclass(frozen=True)
class FoldWinnersContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    families: list[str]
    colours: dict[str, str]
    outer_folds: list[int]  # the grid's columns
    n_folds: int  # outer folds over all repeats
    grid: list[list[WinnerCell]]  # one row per repeat, one cell per outer fold
    stability: list[FamilyStability]


def fold_winners_context(reader: AssessmentReader, *, metric: str | None) -> FoldWinnersContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    overall = reader.winners(kind="overall", metric=metric)
    per_family = reader.winners(kind="family", metric=metric)
    families = [family.name for family in record.families]
    colours = family_colours(families)
    design = record.design
    grid = _grid(overall, per_family, families, design.n_repeats, design.n_outer_folds)
    stability = []
    for family in families:
        mine = per_family[per_family["family"] == family]
        chosen = mine["params"].tolist()
        parameters = _choice_counts([c for c in record.configurations if c.family == family], chosen)
        by_fold = _by_fold(mine, design.n_repeats, design.n_outer_folds)
        stability.append(FamilyStability(
            family=family, n_folds=len(chosen), parameters=parameters, by_fold=by_fold,
            strip_figure=parameter_strip_figure(parameters, by_fold, colours[family],
                                                repeated=design.n_repeats > 1)))
    return FoldWinnersContext(record=record, metric=metric, metrics=design.metrics, families=families,
                              colours=colours, outer_folds=list(range(design.n_outer_folds)),
                              n_folds=len(overall), grid=grid, stability=stability)


def _grid(overall: pd.DataFrame, per_family: pd.DataFrame, families: list[str], n_repeats: int,
          n_outer_folds: int) -> list[list[WinnerCell]]:
    first: dict[tuple[int, int], FoldWinner] = {}  # a fold's overall winner: its first row
    for row in fold_winner_rows(overall):
        first.setdefault((row.repeat, row.outer_fold), row)
    mine: dict[tuple[int, int], dict[str, FoldWinner]] = {}
    for row in fold_winner_rows(per_family):
        mine.setdefault((row.repeat, row.outer_fold), {})[row.family] = row
    return [[WinnerCell(repeat=repeat, outer_fold=fold, overall=first.get((repeat, fold)),
                        by_family=[FamilyWinner(family, mine.get((repeat, fold), {}).get(family))
                                   for family in families])
             for fold in range(n_outer_folds)]
            for repeat in range(n_repeats)]


def _by_fold(winners: pd.DataFrame, n_repeats: int, n_outer_folds: int) -> list[FoldPick]:
    """The family's winner in every outer fold, in order; config and params None where it had none."""
    found = {(row.repeat, row.outer_fold): row for row in fold_winner_rows(winners)}
    return [FoldPick(repeat, fold, config=found[(repeat, fold)].config if (repeat, fold) in found else None,
                       params=found[(repeat, fold)].params if (repeat, fold) in found else None)
            for repeat in range(n_repeats) for fold in range(n_outer_folds)]


def _choice_counts(configs: list[Configuration], chosen: list[dict]) -> list[ParameterChoices]:
    """Per parameter of the family's grid, how often each of its values was the fold winners' choice."""
    parameters: dict[str, dict[str, object]] = {}  # parameter -> value key -> value, in grid order
    for config in configs:
        for name, value in config.params.items():
            parameters.setdefault(name, {}).setdefault(_key(value), value)
    table = []
    for name, values in parameters.items():
        picked = [_key(params[name]) if name in params else NOT_SET for params in chosen]
        if NOT_SET in picked or any(name not in c.params for c in configs):
            values = {**values, NOT_SET: NOT_SET}
        table.append(ParameterChoices(name, [
            Choice(value=value, label=str(value), count=picked.count(key),
                   share=picked.count(key) / len(picked) if picked else math.nan)
            for key, value in values.items()]))
    return table


def _key(value) -> str:
    return json.dumps(value, sort_keys=True)


@router.get("/assessments/{uuid}/fold-winners", name="fold_winners", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def fold_winners(request: Request, reader: ReaderDep, metric: str | None = None):
    return form_page(request, "fold_winners.html", lambda metric: fold_winners_context(reader, metric=metric),
                     {"metric": metric})


@router.get("/api/assessments/{uuid}/fold-winners", name="fold_winners_json",
            response_model=context_model(FoldWinnersContext),
            responses=error_responses(404, 422))
def fold_winners_json(reader: ReaderDep, metric: str | None = None):
    return context_json(fold_winners_context(reader, metric=metric))
