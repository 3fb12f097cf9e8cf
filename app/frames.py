"""The tables an assessment is read as: the same columns whether it comes from the runner or the store."""

from __future__ import annotations

import numpy as np
import pandas as pd

from foldwise.payload import AssessmentPayload

INNER_COLUMNS = ["repeat", "outer_fold", "inner_fold", "family", "config", "params", "metric", "score",
                 "fit_time", "score_time"]
OUTER_COLUMNS = ["repeat", "outer_fold", "family", "config", "params", "metric", "score", "fit_time",
                 "score_time", "n_train", "n_test", "family_winner", "overall_winner"]
WINNER_COLUMNS = ["repeat", "outer_fold", "family", "config", "params", "inner_mean", "inner_std",
                  "outer_score", "optimism"]


def inner_frame(payload: AssessmentPayload) -> pd.DataFrame:
    columns = payload.inner_scores
    frame = pd.DataFrame({
        "repeat": columns.repeat, "outer_fold": columns.outer_fold, "inner_fold": columns.inner_fold,
        "config_index": columns.config, "metric_index": columns.metric,
        "score": _floats(columns.score), "fit_time": _floats(columns.fit_time),
        "score_time": _floats(columns.score_time),
    })
    return _name_configs(frame, payload)[INNER_COLUMNS]


def outer_frame(payload: AssessmentPayload) -> pd.DataFrame:
    columns = payload.outer_scores
    frame = pd.DataFrame({
        "repeat": columns.repeat, "outer_fold": columns.outer_fold,
        "config_index": columns.config, "metric_index": columns.metric,
        "score": _floats(columns.score), "fit_time": _floats(columns.fit_time),
        "score_time": _floats(columns.score_time),
    })
    frame = _name_configs(frame, payload)
    sizes = pd.DataFrame([(f.repeat, f.outer_fold, f.n_train, len(f.test_indices)) for f in payload.outer_folds],
                         columns=["repeat", "outer_fold", "n_train", "n_test"])
    frame = frame.merge(sizes, on=["repeat", "outer_fold"], how="left")
    keys = list(zip(frame["repeat"], frame["outer_fold"], frame["config_index"], strict=True))
    family = {(c.repeat, c.outer_fold, c.config) for c in payload.family_winners}
    overall = {(c.repeat, c.outer_fold, c.config) for c in payload.overall_winners}
    frame["family_winner"] = [key in family for key in keys]
    frame["overall_winner"] = [key in overall for key in keys]
    return frame[OUTER_COLUMNS]


def winners_frame(inner: pd.DataFrame, outer: pd.DataFrame, metric: str, *, flag: str = "overall_winner"
                  ) -> pd.DataFrame:
    """One row per chosen configuration and outer fold: its inner mean ± sd, outer score and optimism.

    ``flag`` picks the overall winners (one row per repeat and outer fold) or the family winners
    (one row per family, repeat and outer fold). The inner sd is the population sd over inner folds,
    as scikit-learn's ``std_test_score``; optimism is inner mean − outer score.
    """
    chosen = outer[(outer["metric"] == metric) & outer[flag]]
    inner = inner[inner["metric"] == metric]
    stats = (inner.groupby(["repeat", "outer_fold", "config"], sort=False)["score"]
             .agg(inner_mean="mean", inner_std=lambda s: float(np.std(s.to_numpy())))
             .reset_index())
    table = chosen.merge(stats, on=["repeat", "outer_fold", "config"], how="left")
    table = table.rename(columns={"score": "outer_score"})
    table["optimism"] = table["inner_mean"] - table["outer_score"]
    order = ["repeat", "outer_fold"] if flag == "overall_winner" else ["repeat", "outer_fold", "family"]
    return table.sort_values(order, kind="stable").reset_index(drop=True)[WINNER_COLUMNS]


def family_summary(outer: pd.DataFrame, metric: str) -> pd.DataFrame:
    """Per family: mean, sd, min and max of the outer scores of its fold winners, and how many."""
    rows = outer[(outer["metric"] == metric) & outer["family_winner"]]
    summary = (rows.groupby("family", sort=False)["score"]
               .agg(mean="mean", sd="std", min="min", max="max", n="count").reset_index())
    return summary.sort_values("mean", ascending=False, kind="stable").reset_index(drop=True)


def _floats(values: list) -> np.ndarray:
    return np.array([np.nan if value is None else value for value in values], dtype=float)


def _name_configs(frame: pd.DataFrame, payload: AssessmentPayload) -> pd.DataFrame:
    configs = payload.configurations
    index = frame["config_index"].to_numpy()
    frame["family"] = [configs[i].family for i in index]
    frame["config"] = [configs[i].id for i in index]
    frame["params"] = [configs[i].params for i in index]
    frame["metric"] = [payload.design.metrics[i] for i in frame["metric_index"]]
    return frame
