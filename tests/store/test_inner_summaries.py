"""The inner mean and sd per outer fold, configuration and metric, kept beside the inner scores."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from alembic import command
from alembic.config import Config
from sqlalchemy import select

import foldwise.store
from foldwise import definitions
from foldwise.store import insert_assessment, tables
from foldwise.store.summaries import KEYS, inner_summary_columns


def _by_loop(repeat, outer_fold, config, metric, score) -> dict[tuple, tuple[float, float]]:
    """The summaries by a plain Python loop: mean and population sd (ddof=0, as scikit-learn's
    std_test_score), both NaN when any fit of the group failed, as GridSearchCV's mean_test_score and
    std_test_score are with error_score=np.nan."""
    groups: dict[tuple, list] = {}
    for key, value in zip(zip(repeat, outer_fold, config, metric, strict=True), score, strict=True):
        groups.setdefault(key, []).append(math.nan if value is None else value)
    result = {}
    for key, values in groups.items():
        if any(math.isnan(value) for value in values):
            result[key] = (math.nan, math.nan)
            continue
        mean = math.fsum(values) / len(values)
        result[key] = (mean, math.sqrt(math.fsum((value - mean) ** 2 for value in values) / len(values)))
    return result


def _as_dict(columns: dict[str, list]) -> dict[tuple, tuple[float, float]]:
    keys = zip(*(columns[name] for name in KEYS), strict=True)
    values = zip(columns["inner_mean"], columns["inner_std"], strict=True)
    return {key: tuple(np.nan if v is None else v for v in pair)
            for key, pair in zip(keys, values, strict=True)}


def test_summaries_equal_a_loop_over_shuffled_rows_with_failed_fits():
    rng = np.random.default_rng(4)
    keys = np.array(list(np.ndindex(2, 3, 4, 5, 2)))  # repeat, outer fold, inner fold, config, metric
    keys = keys[rng.permutation(len(keys))]
    score = rng.normal(0.7, 0.1, len(keys)).tolist()
    for position in rng.choice(len(keys), 12, replace=False):
        score[position] = None
    everything_failed = (keys[:, 0] == 1) & (keys[:, 1] == 2) & (keys[:, 3] == 4) & (keys[:, 4] == 0)
    for position in np.flatnonzero(everything_failed):
        score[position] = None
    columns = [keys[:, 0].tolist(), keys[:, 1].tolist(), keys[:, 3].tolist(), keys[:, 4].tolist(), score]

    summaries = inner_summary_columns(*columns)
    expected = _by_loop(*columns)
    found = _as_dict(summaries)
    assert list(found) == sorted(expected)  # one row per group, in key order
    means, sds = (np.array([found[key][i] for key in sorted(expected)]) for i in (0, 1))
    np.testing.assert_allclose(means, [expected[key][0] for key in sorted(expected)], rtol=0, atol=1e-12)
    np.testing.assert_allclose(sds, [expected[key][1] for key in sorted(expected)], rtol=0, atol=1e-12)
    assert np.isnan(found[(1, 2, 4, 0)][0]) and np.isnan(found[(1, 2, 4, 0)][1])
    assert np.isnan(sds).sum() > 1 and not np.isnan(means).all()  # the failures left marks to check


def test_the_cache_is_the_definition_float_for_float():
    """The store's cached summaries are foldwise.definitions' inner_mean and inner_sd, bit for bit."""
    rng = np.random.default_rng(7)
    keys = np.array(list(np.ndindex(2, 3, 10, 6, 2)))  # 10 inner folds: numpy's pairwise sums differ from a loop
    score = rng.normal(0.7, 0.1, len(keys))
    score[rng.choice(len(keys), 9, replace=False)] = np.nan
    summaries = inner_summary_columns(keys[:, 0], keys[:, 1], keys[:, 3], keys[:, 4], score.tolist())
    found = _as_dict(summaries)
    table = score.reshape(2, 3, 10, 6, 2)
    for (r, o, c, m), (mean, sd) in found.items():
        scores = table[r, o, :, c, m]
        np.testing.assert_array_equal([mean, sd], [definitions.inner_mean(scores), definitions.inner_sd(scores)])


def test_no_inner_scores_give_no_summaries():
    empty = inner_summary_columns([], [], [], [], [])
    assert empty == {name: [] for name in (*KEYS, "inner_mean", "inner_std")}


def _stored(engine, assessment_id: int) -> dict[tuple, tuple[float, float]]:
    s = tables.inner_summaries
    with engine.connect() as connection:
        rows = connection.execute(select(*(s.c[name] for name in KEYS), s.c.inner_mean, s.c.inner_std)
                                  .where(s.c.assessment_id == assessment_id)).all()
    return {tuple(row[:4]): tuple(np.nan if v is None else v for v in row[4:]) for row in rows}


def _assessment_id(engine, uuid) -> int:
    with engine.connect() as connection:
        a = tables.assessments
        return connection.scalar(select(a.c.id).where(a.c.uuid == str(uuid)))


def test_insert_stores_the_summaries_of_the_payloads_inner_scores(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    inner = payload.inner_scores
    expected = _by_loop(inner.repeat, inner.outer_fold, inner.config, inner.metric, inner.score)
    stored = _stored(engine, _assessment_id(engine, payload.uuid))
    assert sorted(stored) == sorted(expected)
    np.testing.assert_allclose([stored[key] for key in sorted(expected)],
                               [expected[key] for key in sorted(expected)], rtol=0, atol=1e-12)


def test_the_migration_fills_the_summaries_of_assessments_stored_before_it(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    assessment_id = _assessment_id(engine, payload.uuid)
    at_insert = _stored(engine, assessment_id)
    config = Config()
    config.set_main_option("script_location", str(Path(foldwise.store.__file__).parent / "migrations"))
    with engine.begin() as connection:  # back to before the summaries (their table goes), and up again
        config.attributes["connection"] = connection
        command.downgrade(config, "0002")
        command.upgrade(config, "head")
    refilled = _stored(engine, assessment_id)
    assert sorted(refilled) == sorted(at_insert) and len(refilled) > 0
    np.testing.assert_allclose([refilled[key] for key in sorted(at_insert)],
                               [at_insert[key] for key in sorted(at_insert)], rtol=0, atol=0)


@pytest.mark.parametrize("bad", [{"repeat": [0, 1]}, {"score": [0.5, 0.6]}])
def test_columns_of_different_lengths_are_refused(bad):
    columns = {"repeat": [0], "outer_fold": [0], "config": [0], "metric": [0], "score": [0.5]} | bad
    with pytest.raises(ValueError, match="must have one length; received lengths"):
        inner_summary_columns(*columns.values())
