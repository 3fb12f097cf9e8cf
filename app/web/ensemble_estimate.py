"""The estimate of an ensemble of configurations, beside the selection procedure and the best family.

One function fills the live preview, the save endpoint and the saved ensemble's page, so what a
script reads is what a person sees.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from fastapi import HTTPException

from foldwise import frames
from foldwise.stats.paired import PairedResult, compare_paired
from foldwise.stats.summaries import score_summary
from foldwise.store import AssessmentReader, AssessmentRecord
from foldwise.web.fold_scores import family_fold_scores, fold_pairs, overall_fold_scores
from foldwise.web.lookup import metric_or_422

_LISTED = 12  # configuration ids named in an error message before "and N more"


@dataclass(frozen=True)
class MemberDetail:
    """One member: its family, parameters and in how many outer folds it won its family, and overall."""

    config: str
    family: str
    params: dict[str, Any]
    n_family_wins: int
    n_overall_wins: int


@dataclass(frozen=True)
class FoldScore:
    repeat: int
    outer_fold: int
    score: float  # NaN where there is none (a member without a prediction there, a failed fit)


@dataclass(frozen=True)
class SelectionScores:
    """The selection procedure's outer scores (the overall fold winners') and their summary."""

    fold_scores: list[FoldScore]
    mean: float  # NaN when no outer fold has a score
    sd: float  # NaN with fewer than two scores
    n: int  # outer folds scored
    n_missing: int


@dataclass(frozen=True)
class BestFamilyScores:
    """The best single family's fold winners' outer scores and their summary."""

    family: str
    fold_scores: list[FoldScore]
    mean: float
    sd: float
    n: int
    n_missing: int


@dataclass(frozen=True)
class EnsembleFold:
    """One outer fold: the ensemble beside the selection procedure and the best family (NaN where missing)."""

    repeat: int
    outer_fold: int
    ensemble: float
    selection: float
    diff: float  # ensemble − selection, on scikit-learn's scores
    best_family: float


@dataclass(frozen=True)
class MetricEstimate:
    """The ensemble's summary on one recorded metric."""

    metric: str
    available: bool = field(default=True, init=False)
    mean: float
    sd: float
    n: int
    n_missing: int


@dataclass(frozen=True)
class MetricUnavailable:
    """A recorded metric the ensemble's predictions cannot be scored on, and why."""

    metric: str
    available: bool = field(default=False, init=False)
    reason: str


@dataclass(frozen=True)
class EnsembleResult:
    """An ensemble's estimate: its outer-fold scores and summary on ``metric``, beside the selection
    procedure (the overall fold winners) and the best single family, with the paired comparison."""

    uuid: str
    members: list[str]  # configuration ids, as given
    member_details: list[MemberDetail]
    rule: str  # the rule fixed in advance the members follow, or "hand-picked"
    caution: str
    voting: str  # "soft", "hard" or "mean"
    voting_text: str
    metric: str
    metric_note: str | None  # why the estimate is not on the selection metric, if it is not
    fold_scores: list[FoldScore]
    mean: float  # NaN when no outer fold could be scored
    sd: float  # NaN with fewer than two outer folds scored
    n: int  # outer folds scored
    n_missing: int
    selection: SelectionScores  # the overall fold winners
    best_family: BestFamilyScores
    folds: list[EnsembleFold]
    comparison: PairedResult | None  # the ensemble (a) against the selection procedure (b); None when it cannot be made
    comparison_note: str | None
    rope: float
    metrics: list[MetricEstimate | MetricUnavailable]  # every recorded metric, in the design's order


def ensemble_estimate(reader: AssessmentReader, members: list[str], *, metric: str | None,
                      rope: float = 0.01) -> EnsembleResult:
    """The ensemble's outer-fold scores and summary, the rule its members follow, and the comparison."""
    # scikit-learn is imported only when an ensemble is scored, so the server starts without it.
    from foldwise.stats.ensembles import ESTIMATE_CAUTION, VOTING_TEXT, score_ensemble

    record = reader.record
    _check_members(record, members)
    if metric is not None:
        metric_or_422(record, metric, loc=("body", "metric"))
    design = record.design
    if design.task == "classification" and not design.classes:
        raise HTTPException(422, "this assessment recorded no classes (design.classes), so the members' "
                                 "predicted probabilities and labels cannot be combined into an ensemble's")
    scored = score_ensemble(_fold_members(reader, members), task=design.task, metrics=design.metrics,
                            classes=design.classes)
    metric, metric_note = _metric(design.metrics, scored.unavailable, metric)
    # Every view below reads this one metric, and only the rows of fold winners and of the members.
    outer = reader.outer(metric=metric, winners="either", configs=members)
    sizes = reader.fold_sizes()
    mine = (scored.scores[scored.scores["metric"] == metric].set_index(["repeat", "outer_fold"])["score"]
            .reindex(sizes.index))
    selection = overall_fold_scores(outer, metric, folds=sizes.index)
    table = frames.family_summary(outer, metric, families=record.family_names, n_folds=record.n_folds)
    best = str(table["family"].iloc[0])
    best_scores = family_fold_scores(outer, metric, [best], folds=sizes.index)[best]
    try:
        comparison = compare_paired(mine.to_numpy(), selection.to_numpy(),
                                    n_train=sizes["n_train"].to_numpy(), n_test=sizes["n_test"].to_numpy(),
                                    rope=rope, names=("the ensemble", "the selection procedure"))
        comparison_note = None
    except ValueError as error:
        comparison, comparison_note = None, f"no paired comparison: {error}"
    folds = [EnsembleFold(repeat=pair.repeat, outer_fold=pair.outer_fold, ensemble=pair.a, selection=pair.b,
                          diff=pair.diff, best_family=float(best_score))
             for pair, best_score in zip(fold_pairs(mine, selection), best_scores.to_numpy(dtype=float),
                                         strict=True)]
    by_metric = scored.scores.groupby("metric", sort=False)["score"]
    metrics = [MetricEstimate(metric=name, **_summary(scores)) for name, scores in by_metric]
    return EnsembleResult(
        uuid=record.uuid, members=list(members), member_details=_details(record, outer, members),
        rule=_rule(record, outer, members), caution=ESTIMATE_CAUTION, voting=scored.voting,
        voting_text=VOTING_TEXT[scored.voting], metric=metric, metric_note=metric_note,
        fold_scores=_fold_scores(mine), **_summary(mine),
        selection=SelectionScores(fold_scores=_fold_scores(selection), **_summary(selection)),
        best_family=BestFamilyScores(family=best, fold_scores=_fold_scores(best_scores), **_summary(best_scores)),
        folds=folds, comparison=comparison, comparison_note=comparison_note, rope=rope,
        metrics=[*metrics, *(MetricUnavailable(metric=name, reason=reason)
                             for name, reason in scored.unavailable.items())])


def _check_members(record: AssessmentRecord, members: list[str]) -> None:
    if not members:
        raise HTTPException(422, "members is empty: name at least one configuration id (tick a fold winner)")
    repeated = sorted(member for member, count in Counter(members).items() if count > 1)
    if repeated:
        raise HTTPException(422, f"members names {repeated} more than once; a configuration counts once "
                                 f"in an ensemble, so give each id once")
    known = [config.id for config in record.configurations]
    unknown = [member for member in members if member not in frozenset(known)]
    if unknown:
        more = f" and {len(known) - _LISTED} more" if len(known) > _LISTED else ""
        raise HTTPException(422, f"members {unknown} are not configurations of this assessment; its "
                                 f"configuration ids are {known[:_LISTED]}{more}")


def _fold_members(reader: AssessmentReader, members: list[str]) -> list:
    from foldwise.stats.ensembles import FoldMembers

    stored = {(p.repeat, p.outer_fold, p.config): (p.kind, p.values) for p in reader.predictions(members)}
    without = [member for member in members if not any(key[2] == member for key in stored)]
    if without:
        raise HTTPException(422, f"members {without} have no stored outer-test predictions (the run kept "
                                 f"none, or every outer fit of them failed), so no ensemble with them can be "
                                 f"scored")
    folds = sorted(reader.fold_targets())
    if any(y_true is None for _, _, y_true in folds):
        raise HTTPException(422, "this assessment stored no true targets of its outer test folds, so an "
                                 "ensemble cannot be scored from its predictions")
    result = []
    for repeat, outer_fold, y_true in folds:
        keys = [(repeat, outer_fold, member) for member in members]
        predictions = [stored[key] for key in keys] if all(key in stored for key in keys) else None
        result.append(FoldMembers(repeat, outer_fold, y_true, predictions))
    return result


def _metric(metrics: list[str], unavailable: dict[str, str], asked: str | None) -> tuple[str, str | None]:
    available = [metric for metric in metrics if metric not in unavailable]
    if asked is not None and asked in unavailable:
        raise HTTPException(422, f"{unavailable[asked]}; choose one of {available}")
    if not available:
        raise HTTPException(422, f"no recorded metric can be computed from these predictions: {unavailable}")
    if asked is not None:
        return asked, None
    if metrics[0] in unavailable:
        return available[0], f"{unavailable[metrics[0]]}, so the estimate is on {available[0]}"
    return metrics[0], None


def _details(record: AssessmentRecord, outer: pd.DataFrame, members: list[str]) -> list[MemberDetail]:
    """Per member: its family, parameters and in how many outer folds it won its family, and overall."""
    rows = outer.drop_duplicates(["repeat", "outer_fold", "config"])
    family_wins = rows[rows["family_winner"]]["config"].value_counts()
    overall_wins = rows[rows["overall_winner"]]["config"].value_counts()
    configs = {config.id: config for config in record.configurations}
    return [MemberDetail(config=member, family=configs[member].family, params=configs[member].params,
                         n_family_wins=int(family_wins.get(member, 0)),
                         n_overall_wins=int(overall_wins.get(member, 0)))
            for member in members]


def _rule(record: AssessmentRecord, outer: pd.DataFrame, members: list[str]) -> str:
    """Which rule fixed in advance the members follow, if any; else "hand-picked"."""
    rows, chosen = outer.drop_duplicates(["repeat", "outer_fold", "config"]), set(members)
    if chosen == set(rows[rows["overall_winner"]]["config"]):
        return "all overall fold winners"
    for family in (family.name for family in record.families):
        if chosen == set(rows[rows["family_winner"] & (rows["family"] == family)]["config"]):
            return f"all fold winners of {family}"
    return "hand-picked"


def _summary(scores: pd.Series) -> dict[str, Any]:
    """mean, sd, n and n_missing of the scores: the fields every summary above shares."""
    values = scores.to_numpy(dtype=float)
    if np.isnan(values).all():
        return {"mean": math.nan, "sd": math.nan, "n": 0, "n_missing": int(values.size)}
    summary = score_summary(values)
    return {"mean": summary.mean, "sd": summary.sd, "n": summary.n, "n_missing": summary.n_missing}


def _fold_scores(scores: pd.Series) -> list[FoldScore]:
    return [FoldScore(repeat=int(repeat), outer_fold=int(outer_fold), score=float(score))
            for (repeat, outer_fold), score in scores.items()]
