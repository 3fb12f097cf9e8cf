"""Two candidates of one assessment, fold by fold: families (their fold winners) or configurations."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd
from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from foldwise import frames
from foldwise.stats.paired import PairedResult, compare_paired
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.answers import PairedComparison
from foldwise.web.charts.comparison import fold_differences_figure, posterior_figure
from foldwise.web.context_json import context_json
from foldwise.web.errors import error_responses, refusal
from foldwise.web.fold_scores import FoldPair, config_fold_scores, family_fold_scores, fold_pairs
from foldwise.web.formatting import params_text
from foldwise.web.forms import form_page, rope_from
from foldwise.web.lookup import ReaderDep, metric_or_422
from foldwise.web.palette import family_colours
from foldwise.web.query import ROPE_TEXT, Rope

router = APIRouter()

_LISTED = 12  # configuration ids named in an error message before "and N more"


@dataclass(frozen=True)
class PairedSide:
    """One side of the comparison: a family (its fold winners) or one configuration."""

    value: str  # as written in the URL: a family name or a configuration id
    kind: str   # "family" (its fold winners' outer scores) or "configuration" (its own outer scores)
    family: str
    label: str


@dataclass(frozen=True)
class PairedComparisonContext:
    record: AssessmentRecord
    metric: str
    metrics: list[str]
    rope: float
    a: PairedSide
    b: PairedSide
    families: list[PairedSide]
    configurations: list[PairedSide]  # empty unless every configuration was refit on every outer fold
    colours: dict[str, str]
    result: PairedResult
    folds: list[FoldPair]
    differences_figure: str
    posterior_figure: str


def paired_comparison_context(reader: AssessmentReader, *, a: str | None, b: str | None, metric: str | None,
                              rope: float) -> PairedComparisonContext:
    record = reader.record
    metric = metric_or_422(record, metric)
    # Every view below reads this one metric, and only the fold winners' rows and those of the two sides.
    outer = reader.outer(metric=metric, winners="either", configs=[v for v in (a, b) if v])
    families = [PairedSide(family.name, "family", family.name, family.name) for family in record.families]
    configurations = [PairedSide(config.id, "configuration", config.family,
                                f"{config.family} ({params_text(config.params)})")
                      for config in record.configurations] if record.design.refit_all else []
    a, b = _defaults(outer, metric, [family.value for family in families], record.n_folds, a or None, b or None)
    first, second = (_candidate(record, families, configurations, value, side)
                     for value, side in ((a, "a"), (b, "b")))
    sizes = reader.fold_sizes()
    scores_a, scores_b = (_scores(outer, metric, side, sizes.index) for side in (first, second))
    try:
        result = compare_paired(scores_a.to_numpy(), scores_b.to_numpy(), n_train=sizes["n_train"].to_numpy(),
                                n_test=sizes["n_test"].to_numpy(), rope=rope,
                                names=(first.label, second.label))
    except ValueError as error:
        raise refusal(422, f"cannot compare a={a!r} with b={b!r} on {metric!r}: {error}; choose another b",
                      loc=["query", "b"]) from None
    colours = family_colours([family.value for family in families])
    pair_colours = (colours[first.family], colours[second.family])
    folds = fold_pairs(scores_a, scores_b)
    names = (first.label, second.label)
    return PairedComparisonContext(
        record=record, metric=metric, metrics=record.design.metrics, rope=rope, a=first, b=second,
        families=families, configurations=configurations, colours=colours,
        result=result, folds=folds,
        differences_figure=fold_differences_figure(folds, rope=rope, names=names, colours=pair_colours,
                                                   metric=metric),
        posterior_figure=posterior_figure(result, rope=rope, names=names, colours=pair_colours, metric=metric))


@router.get("/assessments/{uuid}/compare", name="paired_comparison", response_class=HTMLResponse,
            responses=error_responses(404, 422, html=True))
def paired_comparison(request: Request, reader: ReaderDep, a: str | None = None, b: str | None = None,
                      metric: str | None = None, rope: str | None = Query(None, description=ROPE_TEXT)):
    # The form keeps its place: a value the comparison cannot use is shown beside its field.
    def build(a, b, metric, rope):
        return paired_comparison_context(reader, a=a, b=b, metric=metric, rope=rope_from(rope))

    return form_page(request, "paired_comparison.html", build, {"a": a, "b": b, "metric": metric, "rope": rope})


@router.get("/api/assessments/{uuid}/compare", name="paired_comparison_json", response_model=PairedComparison,
            responses=error_responses(404, 422))
def paired_comparison_json(reader: ReaderDep, a: str | None = None, b: str | None = None,
                           metric: str | None = None, rope: Rope = 0.01):
    """Paired tests of a − b over every outer fold of every repeat (a, b: families or configuration ids)."""
    page = paired_comparison_context(reader, a=a, b=b, metric=metric, rope=rope)
    return {"uuid": page.record.uuid, "metric": page.metric, "rope": page.rope,
            "a": page.a.value, "a_kind": page.a.kind, "a_label": page.a.label,
            "b": page.b.value, "b_kind": page.b.kind, "b_label": page.b.label,
            "n_repeats": page.record.design.n_repeats, **context_json(page.result),
            "folds": [context_json(fold) for fold in page.folds]}


def _defaults(outer: pd.DataFrame, metric: str, families: list[str], n_folds: int, a: str | None,
              b: str | None) -> tuple[str, str]:
    """Unset sides fall to the best families by mean outer score, a first, the same one only if alone."""
    ranked = [str(family) for family in frames.family_summary(outer, metric, families=families,
                                                                         n_folds=n_folds)["family"]]
    ranked += [family for family in families if family not in ranked]
    if a is None:
        a = next((family for family in ranked if family != b), ranked[0])
    if b is None:
        b = next((family for family in ranked if family != a), ranked[0])
    return a, b


def _candidate(record: AssessmentRecord, families: list[PairedSide], configurations: list[PairedSide],
               value: str, side: str) -> PairedSide:
    for candidate in [*families, *configurations]:
        if candidate.value == value:
            return candidate
    names = [family.value for family in families]
    if any(config.id == value for config in record.configurations):
        raise refusal(422, f"{side}={value!r} is a configuration, but this assessment refit only the "
                           f"family winners on each outer fold (design.refit_all is false), so a "
                           f"configuration has no outer score of its own; compare families: {', '.join(names)}",
                      loc=["query", side])
    known = f"families {', '.join(names)}"
    if configurations:
        ids = [config.value for config in configurations]
        more = f" and {len(ids) - _LISTED} more" if len(ids) > _LISTED else ""
        known += f" or configuration ids {', '.join(ids[:_LISTED])}{more}"
    raise refusal(422, f"{side}={value!r} is neither a family nor a configuration of this assessment; "
                       f"choose one of the {known}", loc=["query", side])


def _scores(outer: pd.DataFrame, metric: str, candidate: PairedSide, folds: pd.Index) -> pd.Series:
    if candidate.kind == "family":
        return family_fold_scores(outer, metric, [candidate.value], folds=folds)[candidate.value]
    return config_fold_scores(outer, metric, [candidate.value], folds=folds)[candidate.value]
