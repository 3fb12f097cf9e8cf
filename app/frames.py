"""The tables an assessment is read as: the same columns whether it comes from the runner or the store."""

from __future__ import annotations

import numpy as np
import pandas as pd

from foldwise import definitions
from foldwise.payload import AssessmentPayload

INNER_COLUMNS = ["repeat", "outer_fold", "inner_fold", "family", "config", "params", "metric", "score",
                 "fit_time", "score_time"]
OUTER_COLUMNS = ["repeat", "outer_fold", "family", "config", "params", "metric", "score", "fit_time",
                 "score_time", "n_train", "n_test", "family_winner", "overall_winner"]
FINAL_COLUMNS = ["inner_fold", "family", "config", "params", "metric", "score", "fit_time", "score_time"]
FAILURE_COLUMNS = ["level", "repeat", "outer_fold", "inner_fold", "family", "config", "params", "metric", "stage",
                   "message"]
WINNER_COLUMNS = ["repeat", "outer_fold", "family", "config", "params", "inner_mean", "inner_std",
                  "outer_score", "optimism"]


def inner_frame(payload: AssessmentPayload) -> pd.DataFrame:
    columns = payload.inner_scores
    frame = pd.DataFrame({
        "repeat": columns.repeat, "outer_fold": columns.outer_fold, "inner_fold": columns.inner_fold,
        "config_position": columns.config, "metric_position": columns.metric,
        "score": columns.score, "fit_time": columns.fit_time, "score_time": columns.score_time,
    })
    return _name_configs(frame, payload)[INNER_COLUMNS]


def final_frame(payload: AssessmentPayload) -> pd.DataFrame:
    """The final selection's inner scores (columns ``FINAL_COLUMNS``); empty when the run made none."""
    if payload.final is None:
        return pd.DataFrame({name: [] for name in FINAL_COLUMNS})
    columns = payload.final.inner_scores
    frame = pd.DataFrame({
        "inner_fold": columns.inner_fold, "config_position": columns.config, "metric_position": columns.metric,
        "score": columns.score, "fit_time": columns.fit_time, "score_time": columns.score_time,
    })
    return _name_configs(frame, payload)[FINAL_COLUMNS]


def outer_frame(payload: AssessmentPayload) -> pd.DataFrame:
    columns = payload.outer_scores
    frame = pd.DataFrame({
        "repeat": columns.repeat, "outer_fold": columns.outer_fold,
        "config_position": columns.config, "metric_position": columns.metric,
        "score": columns.score, "fit_time": columns.fit_time, "score_time": columns.score_time,
    })
    frame = _name_configs(frame, payload)
    sizes = pd.DataFrame([(f.repeat, f.outer_fold, f.n_train, len(f.test_indices)) for f in payload.outer_folds],
                         columns=["repeat", "outer_fold", "n_train", "n_test"])
    frame = frame.merge(sizes, on=["repeat", "outer_fold"], how="left")
    keys = list(zip(frame["repeat"], frame["outer_fold"], frame["config_position"], strict=True))
    family = {(c.repeat, c.outer_fold, c.config) for c in payload.family_winners}
    overall = {(c.repeat, c.outer_fold, c.config) for c in payload.overall_winners}
    frame["family_winner"] = [key in family for key in keys]
    frame["overall_winner"] = [key in overall for key in keys]
    return frame[OUTER_COLUMNS]


def failures_frame(payload: AssessmentPayload) -> pd.DataFrame:
    """One row per failed fit, or failed part of a fit, in payload order.

    ``inner_fold`` is a nullable Int64, missing for an outer refit; ``metric`` names the one metric whose
    scoring failed (None when the whole fit failed, or only its predictions); ``stage`` is "fit",
    "score" or "predict" (None in assessments recorded before stages were kept).
    """
    configs, metrics = payload.configurations, payload.design.metrics
    rows = [(f.level, f.repeat, f.outer_fold, f.inner_fold, configs[f.config].family, configs[f.config].id,
             configs[f.config].params, None if f.metric is None else metrics[f.metric], f.stage, f.message)
            for f in payload.failures]
    frame = pd.DataFrame(rows, columns=FAILURE_COLUMNS)
    return frame.astype({"repeat": "int64", "outer_fold": "int64", "inner_fold": "Int64"})


def winners_frame(inner: pd.DataFrame, outer: pd.DataFrame, metric: str, *, flag: str = "overall_winner"
                  ) -> pd.DataFrame:
    """One row per chosen configuration and outer fold: its inner mean ± sd, outer score and optimism.

    ``flag`` picks the overall winners (one row per repeat and outer fold) or the family winners
    (one row per family, repeat and outer fold). The inner mean and sd (population sd, as
    scikit-learn's ``std_test_score``; both NaN when an inner fold failed) and the optimism are
    ``foldwise.definitions``'.
    """
    chosen = outer[(outer["metric"] == metric) & outer[flag]]
    inner = inner[inner["metric"] == metric]
    codes, configs = pd.factorize(inner["config"])
    summaries = definitions.inner_summaries(inner["repeat"], inner["outer_fold"], codes, np.zeros(len(codes)),
                                            inner["score"].to_numpy(dtype=float))
    stats = pd.DataFrame({"repeat": summaries["repeat"], "outer_fold": summaries["outer_fold"],
                          "config": np.asarray(configs, dtype=object)[summaries["config"]],
                          "inner_mean": summaries["inner_mean"], "inner_std": summaries["inner_std"]})
    table = chosen.merge(stats, on=["repeat", "outer_fold", "config"], how="left")
    table = table.rename(columns={"score": "outer_score"})
    table["optimism"] = definitions.optimism(table["inner_mean"], table["outer_score"])
    order = ["repeat", "outer_fold"] if flag == "overall_winner" else ["repeat", "outer_fold", "family"]
    return table.sort_values(order, kind="stable").reset_index(drop=True)[WINNER_COLUMNS]


def family_summary(outer: pd.DataFrame, metric: str, *, families: list[str], n_folds: int) -> pd.DataFrame:
    """Per family: mean, sd, min and max of the outer scores of its fold winners, with the folds used
    (``n``) and failed (``n_failed``) of the design's ``n_folds``; ``foldwise.definitions.family_summary``."""
    rows = outer[(outer["metric"] == metric) & outer["family_winner"]]
    return definitions.family_summary(rows, families=families, n_folds=n_folds)


def _name_configs(frame: pd.DataFrame, payload: AssessmentPayload) -> pd.DataFrame:
    configs = payload.configurations
    families, ids, params = (np.empty(len(configs), dtype=object) for _ in range(3))
    for position, config in enumerate(configs):
        families[position], ids[position], params[position] = config.family, config.id, config.params
    positions = frame["config_position"].to_numpy()
    frame["family"], frame["config"], frame["params"] = families[positions], ids[positions], params[positions]
    frame["metric"] = np.array(payload.design.metrics, dtype=object)[frame["metric_position"].to_numpy()]
    return frame
