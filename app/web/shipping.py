"""What to ship: the final selection's choice beside the outer folds' choices, for the report and the page.

The report and the assessment page both call :func:`final_summary`, so they count agreement the same way
and say the same sentence when the fold winners disagree. The page adds the alternative, the ensemble of
the overall fold winners, scored on the same outer folds by ``ensemble_estimate`` and compared there with
the selection procedure; scoring it reads every member's predictions, so the overview fetches that part
after it has shown (a fragment route) rather than making every visit wait. Here too: the JSON of the
whole section and the routes that download the two models.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING

import pandas as pd
from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse, Response

from foldwise.store import AssessmentReader, AssessmentRecord, StoredFinal
from foldwise.web.answers import WhatToShip
from foldwise.web.context_json import context_json
from foldwise.web.errors import error_responses
from foldwise.web.formatting import params_text
from foldwise.web.lookup import ReaderDep

if TYPE_CHECKING:  # imported where scored: it reads the stored predictions
    from foldwise.web.ensemble_estimate import EnsembleResult

router = APIRouter()

UNSTABLE = ("The outer folds disagree about the configuration: the selection itself is unstable on data of this "
            "size. The nested estimate covers that instability; the one model shipped does not show it.")


@dataclass(frozen=True)
class ParameterAgreement:
    name: str
    value: str  # as chosen on all rows
    same: int   # outer folds whose winner is of the same family and chose this value


@dataclass(frozen=True)
class FinalSummary:
    """The final choice and how many outer folds chose the same configuration, family and parameter values."""

    family: str
    config: str
    params: str
    same_config: int
    same_family: int
    n_folds: int
    parameters: list[ParameterAgreement]

    @property
    def unstable(self) -> bool:
        """Fewer than half the outer folds chose the configuration shipped: the selection itself varies."""
        return self.same_config * 2 < self.n_folds

    @property
    def instability(self) -> str | None:
        """The one sentence said when the fold winners disagree a lot; None when they mostly agree."""
        return UNSTABLE if self.unstable else None


def final_summary(family: str, config: str, params: dict, winners: pd.DataFrame) -> FinalSummary:
    """``winners`` has one row per outer fold with its overall winner's ``family``, ``config`` and ``params``."""
    parameters = [ParameterAgreement(name=key.rsplit("__", 1)[-1], value=str(value),
                                     same=sum(row.family == family and row.params.get(key) == value
                                              for row in winners.itertuples()))
                  for key, value in params.items()]
    return FinalSummary(family=family, config=config, params=params_text(params),
                        same_config=int((winners["config"] == config).sum()),
                        same_family=int((winners["family"] == family).sum()), n_folds=len(winners),
                        parameters=parameters)


@dataclass(frozen=True)
class FoldWinnerEnsemble:
    """The alternative to shipping one model: the overall fold winners together, scored on the outer folds."""

    members: list[str]  # configuration ids, in order of their first win
    estimate: EnsembleResult | None  # mean, sd, n, the comparison with the selection procedure...
    note: str | None  # why it could not be scored, when it could not
    model_kept: bool  # every member has kept fitted fold winners: the model file can be made


@dataclass(frozen=True)
class Shipping:
    """What the page's "What to ship" section shows at once; the ensemble follows (``fold_winner_ensemble``)."""

    final: FinalSummary | None
    final_model: bool  # the final refit on every row was kept: it can be downloaded
    final_note: str | None  # why there is no final choice or no model


def shipping(record: AssessmentRecord, winners: pd.DataFrame, final: StoredFinal | None) -> Shipping:
    """``winners``: the overall fold winners on the selection metric (``store.winners_for``)."""
    summary, note = None, None
    if final is None:
        note = "This run made no final selection on all rows: nested_cv(..., final=True) makes one."
    elif final.selection.config is None:
        note = "The final selection on all rows chose nothing: every configuration failed there."
    else:
        config = record.configurations[final.selection.config]
        summary = final_summary(config.family, config.id, config.params, winners)
        if not final.has_model:
            note = ("The chosen configuration's refit on all rows was not kept"
                    + (f": {final.selection.refit_error}" if final.selection.refit_error else "") + ".")
    return Shipping(final=summary, final_model=bool(final and final.has_model), final_note=note)


def shipping_json(ship: Shipping) -> dict:
    """The section as the JSON API answers it: the same numbers, plus the sentence said when folds disagree."""
    final = None if ship.final is None else asdict(ship.final) | {"unstable": ship.final.unstable,
                                                                  "instability": ship.final.instability}
    return {"final": final, "final_model": ship.final_model, "final_note": ship.final_note}


def fold_winner_ensemble(reader: AssessmentReader) -> FoldWinnerEnsemble:
    """The overall fold winners' ensemble on the selection metric, compared with the selection procedure."""
    from foldwise.web.ensemble_estimate import ensemble_estimate

    record = reader.record
    members = list(dict.fromkeys(reader.winners(kind="overall")["config"]))
    if not members:
        return FoldWinnerEnsemble(members, None, "No outer fold has a winner, so there is no ensemble of them.",
                                  False)
    try:
        estimate, note = ensemble_estimate(reader, members, metric=record.design.selection_metric), None
    except HTTPException as refused:  # no stored predictions, or no metric computable from them
        estimate, note = None, f"The ensemble of the fold winners cannot be scored: {_said(refused.detail)}"
    counts = reader.fitted_model_counts()
    return FoldWinnerEnsemble(members, estimate, note, all(counts.get(member) for member in members))


@router.get("/assessments/{uuid}/what-to-ship/ensemble", name="what_to_ship_ensemble", response_class=HTMLResponse,
            include_in_schema=False)
def what_to_ship_ensemble(request: Request, reader: ReaderDep):
    """The ensemble part of the overview's "What to ship", as the HTML the overview inserts once it has it."""
    return request.app.state.templates.TemplateResponse(request, "_what_to_ship_ensemble.html",
                                                        {"record": reader.record, "e": fold_winner_ensemble(reader)})


@router.get("/api/assessments/{uuid}/what-to-ship", name="what_to_ship_json", response_model=WhatToShip,
            responses=error_responses(404))
def what_to_ship_json(reader: ReaderDep):
    """On the selection metric: the final choice on all rows beside the fold winners, and the ensemble of the
    overall fold winners compared with the selection procedure on the same outer folds."""
    record = reader.record
    ship = shipping(record, reader.winners(kind="overall"), reader.final_selection())
    return {"uuid": record.uuid, **shipping_json(ship), "ensemble": context_json(fold_winner_ensemble(reader))}


def _said(detail) -> str:
    """A refusal's message: its detail as raised (text) or in the one refusal shape (a list of {loc, msg})."""
    if isinstance(detail, list):
        return "; ".join(str(entry.get("msg", entry)) if isinstance(entry, dict) else str(entry) for entry in detail)
    return str(detail)


@dataclass(frozen=True)
class _Members:
    """What ``prefit_ensemble`` reads of a saved ensemble, for the fold winners' ensemble that is not saved."""

    members: list[str]
    voting: str


@router.get("/api/assessments/{uuid}/final/model", name="final_model", response_class=Response,
            responses={200: {"content": {"application/octet-stream": {"schema": {"type": "string",
                                                                                 "format": "binary"}}},
                             "description": "a skops file: the chosen configuration refit on every row"},
                       **error_responses(404, 409)})
def final_model(reader: ReaderDep):
    """The model the nested estimate describes: the final selection's choice refit on every row (skops)."""
    uuid = reader.uuid
    final = reader.final_selection()
    if final is None:
        raise HTTPException(409, "this assessment has no final selection on all rows: run "
                                 "nested_cv(..., final=True) to make one")
    data = reader.final_model()
    if data is None:
        reason = final.selection.refit_error or "every configuration failed, or skops could not write the model"
        raise HTTPException(409, f"the final selection kept no model: {reason}")
    return Response(data, media_type="application/octet-stream", headers={
        "content-disposition": f'attachment; filename="final-model-{uuid}.skops"'})


@router.get("/api/assessments/{uuid}/fold-winners/model", name="fold_winners_model", response_class=Response,
            responses={200: {"content": {"application/octet-stream": {"schema": {"type": "string",
                                                                                 "format": "binary"}}},
                             "description": "a skops file: the kept overall fold winners, averaged"},
                       **error_responses(404, 409, 422)})
def fold_winners_model(reader: ReaderDep):
    """The ensemble of the overall fold winners as fitted on their outer training sets, averaged (skops)."""
    import skops.io

    from foldwise.ensemble import UntrustedTypes, prefit_ensemble
    from foldwise.web.ensemble_estimate import ensemble_estimate

    uuid = reader.uuid
    members = list(dict.fromkeys(reader.winners(kind="overall")["config"]))
    if not members:
        raise HTTPException(409, "no outer fold has a winner, so there is no ensemble of them")
    voting = ensemble_estimate(reader, members, metric=None).voting
    try:
        fitted = prefit_ensemble(reader.record, _Members(members, voting), reader.fitted_models(members))
    except LookupError as error:
        raise HTTPException(409, str(error)) from None
    except (UntrustedTypes, ValueError) as error:
        raise HTTPException(422, str(error)) from None
    return Response(skops.io.dumps(fitted), media_type="application/octet-stream", headers={
        "content-disposition": f'attachment; filename="fold-winners-{uuid}.skops"'})
