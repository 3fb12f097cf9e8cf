"""What each JSON route answers, as pydantic models: the OpenAPI schema a client reads, and a check of
every answer on its way out (an answer that does not fit is a server error, never a silent change).

The fields listed are a floor: an answer may carry more (``extra="allow"``), so a field added to a
page's context reaches scripts before its line here does. A number that could not be computed is
null (NaN in the frames), so numbers are ``float | None``. Answers filled from a page's context
dataclass take a model derived from it (``context_json.context_model``).
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from foldwise.web.metric_display import API_ORIENTATION

Number = float | None  # null where the number is undefined (NaN): a failed fit, too few folds
ORIENTED = "scikit-learn's orientation (greater is better; a neg_* metric is the negated loss)"


class _Answer(BaseModel):
    model_config = ConfigDict(extra="allow")


class Health(_Answer):
    status: str


class Pushed(_Answer):
    uuid: str
    created: bool = Field(description="false when this uuid was stored already with the same content")
    url: str = Field(description="the assessment's page")


class ShareLink(_Answer):
    url: str = Field(description="the page's URL with a read key, which the server trades for a cookie")


class AssessmentRow(_Answer):
    """One line of the index of stored assessments."""

    uuid: str
    name: str
    dataset: str | None
    created_at: str
    task: str
    n_repeats: int
    n_outer_folds: int
    n_inner_folds: int
    n_configs: int
    families: list[str]
    selection_metric: str = Field(description=API_ORIENTATION)
    estimate_mean: Number = Field(description=f"the nested estimate, in {ORIENTED}")
    estimate_sd: Number = Field(description="sd of the fold winners' outer scores over the outer folds")
    design: str
    n_ensembles: int


class AssessmentAnswer(_Answer):
    uuid: str
    name: str
    dataset: str | None
    created_at: str
    # As pushed (AssessmentPayload's design, families and configurations), kept loose here so that an
    # assessment stored under older rules is still answered.
    design: dict[str, Any]
    design_text: str
    families: list[dict[str, Any]]
    configurations: list[dict[str, Any]]
    fingerprint: str = Field(description="equal for two assessments exactly when their outer folds can be paired")
    versions: dict[str, str]
    seeds: dict[str, Any]
    total_fit_time: float
    metric: str = Field(description=API_ORIENTATION)
    nested_estimate: dict[str, Any] = Field(description=f"mean, sd, min, max of the fold winners' outer scores, "
                                                        f"in {ORIENTED}")
    family_summary: list[dict[str, Any]]
    n_failures: int
    failures: list[dict[str, Any]] = Field(description="the first failed fits; n_failures counts them all")
    headline: dict[str, Any] = Field(description="on `metric`: the nested estimate with its headline interval, the "
                                                 "fold winners' mean best inner score (what a search without an outer "
                                                 "loop reports) and the mean optimism between them")
    shipping: dict[str, Any] = Field(description="on the selection metric: the final choice on all rows beside the "
                                                 "fold winners (the ensemble alternative: /what-to-ship)")


class WhatToShip(_Answer):
    uuid: str
    final: dict[str, Any] | None = Field(description="the final choice on all rows and how many outer folds chose "
                                                     "the same configuration, family and parameter values; null "
                                                     "when the run made no final selection")
    final_model: bool = Field(description="the final refit on all rows was kept (GET .../final/model)")
    final_note: str | None
    ensemble: dict[str, Any] = Field(description="the overall fold winners as one ensemble: its estimate on the "
                                                 "same outer folds and its paired comparison with the selection")


class _ScoreRow(_Answer):
    repeat: int
    outer_fold: int
    family: str
    config: str
    params: dict[str, Any]
    metric: str = Field(description=API_ORIENTATION)
    score: Number = Field(description=f"in {ORIENTED}; null for a failed fit")
    fit_time: Number
    score_time: Number


class InnerScoreRow(_ScoreRow):
    inner_fold: int


class OuterScoreRow(_ScoreRow):
    n_train: int | None
    n_test: int | None
    family_winner: bool
    overall_winner: bool


class WinnerRow(_Answer):
    repeat: int
    outer_fold: int
    family: str
    config: str
    params: dict[str, Any]
    inner_mean: Number = Field(description=f"in {ORIENTED}")
    inner_std: Number
    outer_score: Number = Field(description=f"in {ORIENTED}")
    optimism: Number = Field(description="inner mean − outer score, on scikit-learn's scores: positive when the "
                                         "inner folds flattered the winner, whatever the metric")


class PairedFold(_Answer):
    repeat: int
    outer_fold: int
    a: Number = Field(description=f"in {ORIENTED}")
    b: Number = Field(description=f"in {ORIENTED}")
    diff: Number = Field(description="a − b on scikit-learn's scores: positive favours a, whatever the metric")


class PairedComparison(_Answer):
    uuid: str
    metric: str = Field(description=API_ORIENTATION)
    rope: float
    a: str
    a_kind: str
    a_label: str
    b: str
    b_kind: str
    b_label: str
    n_repeats: int
    n: int
    n_missing: int
    mean_diff: Number = Field(description="mean of a − b on scikit-learn's scores: positive favours a")
    diff_low: Number = Field(description="corrected interval of the mean difference a − b (Nadeau and Bengio's "
                                         "variance, Student t with n − 1 df): low end")
    diff_high: Number = Field(description="the same interval's high end")
    diff_level: float = Field(description="the interval's level")
    corrected_t: Number
    corrected_p: Number
    bayes_a: Number
    bayes_rope: Number
    bayes_b: Number
    verdict: str
    folds: list[PairedFold]


class Ranking(_Answer):
    uuid: str
    metric: str
    friedman_stat: Number
    friedman_p: Number
    critical_difference: Number = Field(description="Nemenyi's critical difference; null when Friedman's test "
                                                    "cannot run (two families, or every block tied)")
    n_blocks: int
    n_missing: int
    note: str | None
    verdict: str = Field(description="the ranking in one sentence")
    mean_ranks: dict[str, Number]
    families: list[dict[str, Any]]
    blocks: list[dict[str, Any]]


class AssessmentsComparison(_Answer):
    x: str
    y: str
    metric: str | None
    rope: float
    paired: bool
    reason: str | None = Field(description="why the outer folds cannot be paired; null when they can")
    fingerprints: dict[str, str]
    comparisons: list[dict[str, Any]]
    summaries: list[dict[str, Any]]


class EnsembleEstimate(_Answer):
    uuid: str
    members: list[str]
    member_details: list[dict[str, Any]]
    rule: str
    caution: str
    voting: str
    metric: str = Field(description=API_ORIENTATION)
    mean: Number = Field(description=f"in {ORIENTED}")
    sd: Number
    n: int
    n_missing: int
    fold_scores: list[dict[str, Any]]
    selection: dict[str, Any]
    best_family: dict[str, Any]
    folds: list[dict[str, Any]]
    comparison: dict[str, Any] | None
    rope: float
    metrics: list[dict[str, Any]]


class Ensemble(_Answer):
    id: str
    assessment_uuid: str
    name: str
    note: str
    created_at: str
    voting: str
    metric: str = Field(description=API_ORIENTATION)
    estimate_mean: Number = Field(description=f"in {ORIENTED}")
    estimate_sd: Number
    members: list[str]
    url: str
    spec_url: str
    model_url: str


class EnsembleWithEstimate(Ensemble):
    estimate: EnsembleEstimate
    models_kept: bool
