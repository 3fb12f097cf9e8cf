"""Compute cost: the fits an assessment took, their CPU seconds, and the time other designs would take."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import pandas as pd
from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse

from foldwise.stats.planner import project_wall_time
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.charts.cost import cost_figure
from foldwise.web.context_json import context_json, context_model
from foldwise.web.errors import error_responses, refusal
from foldwise.web.forms import form_page
from foldwise.web.lookup import ReaderDep
from foldwise.web.palette import family_colours

router = APIRouter()

DEFAULT_CORES = 2
_MOST = 100_000  # a sanity bound on every planner input


@dataclass(frozen=True)
class CostContext:
    record: AssessmentRecord
    families: list[str]
    colours: dict[str, str]
    fits: dict  # inner, outer, total fits done; inner_failed, outer_failed
    by_family: list[dict]  # family, n_fits, inner_seconds, outer_seconds, total_seconds (fit + score time)
    by_level: dict  # inner_seconds, outer_seconds, total_seconds
    mean_fit_seconds: float | None  # mean fit + score time of one recorded fit
    plan: dict  # the planner's inputs: outer, inner, repeats, configs, cores, refits_per_fold
    projection: dict | None  # stats.planner.Projection of the planned design, None without fit times
    own_projection: dict | None  # the same for this assessment's own design on plan["cores"] cores
    cost_figure: str


def compute_cost_context(reader: AssessmentReader, *, outer: int | None = None, inner: int | None = None,
                         repeats: int | None = None, configs: int | None = None,
                         cores: int | None = None) -> CostContext:
    record = reader.record
    design = record.design
    costs = reader.fit_costs()  # summed by the database: no score is read
    failed = reader.failure_counts()
    families = [family.name for family in record.families]
    levels = {level: costs[costs["level"] == level] for level in ("inner", "outer")}
    n_inner, n_outer = (int(levels[level]["n_fits"].sum()) for level in ("inner", "outer"))
    fits = {"inner": n_inner, "outer": n_outer, "total": n_inner + n_outer,
            "inner_failed": failed.get("inner", 0), "outer_failed": failed.get("outer", 0)}
    by_family = [_family_cost(family, levels["inner"], levels["outer"]) for family in families]
    inner_seconds, outer_seconds = (float(levels[level]["seconds"].sum()) for level in ("inner", "outer"))
    by_level = {"inner_seconds": inner_seconds, "outer_seconds": outer_seconds,
                "total_seconds": inner_seconds + outer_seconds}
    n_timed = int(costs["n_timed"].sum())
    mean_fit = (inner_seconds + outer_seconds) / n_timed if n_timed else None
    cores = cores or DEFAULT_CORES
    own = _design(design.n_outer_folds, design.n_inner_folds, design.n_repeats, len(record.configurations),
                  cores, refit_all=design.refit_all, n_families=len(families))
    plan = _design(outer or own["outer"], inner or own["inner"], repeats or own["repeats"],
                   configs or own["configs"], cores, refit_all=design.refit_all, n_families=len(families))
    colours = family_colours(families)
    return CostContext(
        record=record, families=families, colours=colours, fits=fits, by_family=by_family, by_level=by_level,
        mean_fit_seconds=mean_fit, plan=plan, projection=_project(mean_fit, plan),
        own_projection=_project(mean_fit, own), cost_figure=cost_figure(by_family, colours))


def _design(outer: int, inner: int, repeats: int, configs: int, cores: int, *, refit_all: bool,
            n_families: int) -> dict:
    # Refit as this assessment did: every configuration, or each family's winner.
    refits = configs if refit_all else min(n_families, configs)
    return {"outer": outer, "inner": inner, "repeats": repeats, "configs": configs, "cores": cores,
            "refits_per_fold": refits}


def _family_cost(family: str, inner: pd.DataFrame, outer: pd.DataFrame) -> dict:
    inner, outer = inner[inner["family"] == family], outer[outer["family"] == family]
    inner_seconds, outer_seconds = float(inner["seconds"].sum()), float(outer["seconds"].sum())
    return {"family": family, "n_fits": int(inner["n_fits"].sum() + outer["n_fits"].sum()),
            "inner_seconds": inner_seconds, "outer_seconds": outer_seconds,
            "total_seconds": inner_seconds + outer_seconds}


def _project(mean_fit: float | None, plan: dict) -> dict | None:
    if mean_fit is None:
        return None
    try:
        projection = project_wall_time(mean_fit, n_outer=plan["outer"], n_inner=plan["inner"],
                                       n_repeats=plan["repeats"], n_configs=plan["configs"],
                                       n_cores=plan["cores"], n_refits_per_fold=plan["refits_per_fold"])
    except ValueError as error:
        raise HTTPException(422, f"cannot plan {plan}: {error}") from None
    return asdict(projection)


def _counts(**given: str | None) -> dict[str, int | None]:
    """Planner inputs from the query: whole numbers 1.._MOST; absent or left empty means the default."""
    counts = {}
    for name, text in given.items():
        if text is None or not text.strip():
            counts[name] = None
            continue
        try:
            counts[name] = int(text)
        except ValueError:
            counts[name] = 0
        if not 1 <= counts[name] <= _MOST:
            raise refusal(422, f"{name} must be a whole number from 1 to {_MOST}; got {text!r}", loc=["query", name])
    return counts


@router.get("/assessments/{uuid}/cost", name="compute_cost", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def compute_cost(request: Request, reader: ReaderDep, outer: str | None = None, inner: str | None = None,
                 repeats: str | None = None, configs: str | None = None, cores: str | None = None):
    def build(**given):
        return compute_cost_context(reader, **_counts(**given))

    return form_page(request, "compute_cost.html", build,
                     {"outer": outer, "inner": inner, "repeats": repeats, "configs": configs, "cores": cores})


@router.get("/api/assessments/{uuid}/cost", name="compute_cost_json", response_model=context_model(CostContext),
            responses=error_responses(404, 422))
def compute_cost_json(reader: ReaderDep, outer: str | None = None, inner: str | None = None,
                      repeats: str | None = None, configs: str | None = None, cores: str | None = None):
    counts = _counts(outer=outer, inner=inner, repeats=repeats, configs=configs, cores=cores)
    return context_json(compute_cost_context(reader, **counts))
