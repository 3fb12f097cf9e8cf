"""The store reader: filtered reads equal the payload's frames filtered in pandas, the cost sums equal a
plain sum over every inner and outer score, and one reader keeps one snapshot while a writer deletes.

References: ``foldwise.frames`` built from the payload itself (no store involved), filtered by pandas
in the test; the fit times summed by a plain pandas groupby over those frames.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

from foldwise import frames
from foldwise.store import AssessmentNotFound, StoreReader, delete_assessment, insert_assessment, read_assessment


@pytest.fixture
def stored(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    return payload


def _rows(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.reset_index(drop=True)


def test_outer_filters_in_sql_equal_the_payload_frame_filtered_in_pandas(engine, stored):
    every = frames.outer_frame(stored)
    metric = stored.design.metrics[1]
    config = stored.configurations[3].id
    with read_assessment(engine, str(stored.uuid)) as reader:
        assert_frame_equal(reader.outer(), every)
        assert_frame_equal(_rows(reader.outer(metric=metric)), _rows(every[every["metric"] == metric]))
        for winners, chosen in (("family", every["family_winner"]), ("overall", every["overall_winner"]),
                                ("either", every["family_winner"] | every["overall_winner"])):
            expected = every[(every["metric"] == metric) & (chosen | (every["config"] == config))]
            assert_frame_equal(_rows(reader.outer(metric=metric, winners=winners, configs=[config])),
                               _rows(expected))
        here = (every["repeat"] == 1) & (every["outer_fold"] == 2)
        assert_frame_equal(_rows(reader.outer(repeat=1, outer_fold=2)), _rows(every[here]))


def test_inner_and_failures_of_one_fold_and_metric_equal_the_payload_frames(engine, stored):
    inner, failures = frames.inner_frame(stored), frames.failures_frame(stored)
    metric = stored.design.metrics[0]
    with read_assessment(engine, str(stored.uuid)) as reader:
        fold = (inner["repeat"] == 1) & (inner["outer_fold"] == 2) & (inner["metric"] == metric)
        assert_frame_equal(_rows(reader.inner(metric=metric, repeat=1, outer_fold=2)), _rows(inner[fold]))
        mine = (failures["repeat"] == 1) & (failures["outer_fold"] == 2)
        read = reader.failures(repeat=1, outer_fold=2)
        assert len(read) == mine.sum() > 0
        assert read["message"].tolist() == failures.loc[mine, "message"].tolist()
        assert reader.failure_counts() == failures["level"].value_counts().to_dict()
        assert len(reader.failures(limit=1)) == 1


def test_fit_costs_equal_a_plain_sum_over_every_score(engine, stored):
    selection = stored.design.metrics[0]
    with read_assessment(engine, str(stored.uuid)) as reader:
        costs = reader.fit_costs().set_index(["level", "family"])
    for level, frame in (("inner", frames.inner_frame(stored)), ("outer", frames.outer_frame(stored))):
        fits = frame[frame["metric"] == selection]
        seconds = fits["fit_time"] + fits["score_time"]  # NaN for a failed fit, which pandas' sum skips
        for family, mine in fits.groupby("family"):
            row = costs.loc[(level, family)]
            assert row["n_fits"] == len(mine)
            assert row["seconds"] == pytest.approx(seconds[mine.index].sum(), rel=1e-12)
            assert row["n_timed"] == seconds[mine.index].notna().sum()


def test_winners_equal_the_frames_definition(engine, stored):
    inner, outer = frames.inner_frame(stored), frames.outer_frame(stored)
    for metric in stored.design.metrics:
        with read_assessment(engine, str(stored.uuid)) as reader:
            for kind, flag in (("overall", "overall_winner"), ("family", "family_winner")):
                assert_frame_equal(reader.winners(kind=kind, metric=metric),
                                   frames.winners_frame(inner, outer, metric, flag=flag))


def test_one_reader_keeps_its_snapshot_while_another_connection_deletes(engine, stored):
    uuid = str(stored.uuid)
    with StoreReader.open(engine) as store:
        reader = store.require(uuid)
        assert delete_assessment(engine, uuid)  # committed by another connection
        # Everything the reader reads afterwards is the assessment as it was when it was found.
        assert_frame_equal(reader.outer(), frames.outer_frame(stored))
        assert len(reader.inner()) == len(stored.inner_scores.score)
        assert np.isfinite(reader.fit_costs()["seconds"]).all()
    with StoreReader.open(engine) as store:
        assert store.assessment(uuid) is None
        with pytest.raises(AssessmentNotFound):
            store.require(uuid)


def test_a_reader_finds_an_assessment_once_whatever_its_uuid_spelling(engine, stored):
    uuid = str(stored.uuid)
    with StoreReader.open(engine) as store:
        assert store.assessment(uuid.upper()) is store.assessment(uuid)
        assert store.assessment("not a uuid") is None
        assert store.count_assessments() == 1
