"""Reading assessments back: the index, the record, and the score frames."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

from foldwise import frames
from foldwise.payload import AssessmentPayload
from foldwise.store import (
    AssessmentNotFound,
    failures_for,
    family_winners_for,
    fold_sizes_for,
    get_assessment,
    inner_scores_for,
    insert_assessment,
    list_assessments,
    outer_scores_for,
    winners_for,
)


@pytest.fixture
def stored(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    return payload


def test_score_frames_equal_the_frames_of_the_payload(engine, stored):
    assert_frame_equal(inner_scores_for(engine, str(stored.uuid)), frames.inner_frame(stored))
    assert_frame_equal(outer_scores_for(engine, str(stored.uuid)), frames.outer_frame(stored))


def test_inner_scores_of_one_fold_are_that_fold_of_the_payload_frame(engine, stored):
    whole = frames.inner_frame(stored)
    for repeat, outer_fold in [(1, 2), (0, None), (None, 1)]:
        keep = np.ones(len(whole), dtype=bool)
        if repeat is not None:
            keep &= whole["repeat"].to_numpy() == repeat
        if outer_fold is not None:
            keep &= whole["outer_fold"].to_numpy() == outer_fold
        assert_frame_equal(inner_scores_for(engine, stored.uuid, repeat=repeat, outer_fold=outer_fold),
                           whole[keep].reset_index(drop=True))
    with pytest.raises(ValueError, match=r"repeat must be an integer in 0\.\.1 .*received 2"):
        inner_scores_for(engine, stored.uuid, repeat=2)


def test_winners_equal_winners_frame_on_the_payload_frames(engine, stored):
    inner, outer = frames.inner_frame(stored), frames.outer_frame(stored)
    metric = stored.design.selection_metric
    assert_frame_equal(winners_for(engine, stored.uuid), frames.winners_frame(inner, outer, metric))
    assert_frame_equal(family_winners_for(engine, stored.uuid),
                       frames.winners_frame(inner, outer, metric, flag="family_winner"))


def test_a_fold_winner_row_matches_a_hand_computation(engine, stored):
    repeat, outer_fold = 1, 2  # the fold with a failed inner fit
    [choice] = [c for c in stored.overall_winners if (c.repeat, c.outer_fold) == (repeat, outer_fold)]
    fold = {"repeat": repeat, "outer_fold": outer_fold, "config": choice.config, "metric": 0}
    scores = scores_where(stored.inner_scores, **fold)
    assert len(scores) == 2
    [outer_score] = scores_where(stored.outer_scores, **fold)
    table = winners_for(engine, stored.uuid)
    row = table[(table["repeat"] == repeat) & (table["outer_fold"] == outer_fold)].iloc[0]
    assert row["config"] == stored.configurations[choice.config].id
    # scikit-learn's GridSearchCV reports std_test_score as the population sd (ddof=0) over the splits.
    assert row["inner_mean"] == pytest.approx(np.mean(scores), rel=1e-12)
    assert row["inner_std"] == pytest.approx(np.std(scores, ddof=0), rel=1e-12)
    assert row["outer_score"] == outer_score
    assert row["optimism"] == pytest.approx(np.mean(scores) - outer_score, rel=1e-12)


def scores_where(block, **wanted) -> list[float | None]:
    """The scores of a payload's columnar score block whose other columns hold the ``wanted`` values."""
    columns = [getattr(block, name) for name in wanted]
    return [score for score, *values in zip(block.score, *columns, strict=True)
            if values == list(wanted.values())]


def _winner_outer_scores(payload: AssessmentPayload) -> list[float]:
    return [score for c in payload.overall_winners
            for score in scores_where(payload.outer_scores, repeat=c.repeat, outer_fold=c.outer_fold,
                                      config=c.config, metric=0)]


def test_the_nested_estimate_is_mean_and_sample_sd_of_the_winners_outer_scores(engine, stored):
    scores = _winner_outer_scores(stored)
    assert len(scores) == 6
    record = get_assessment(engine, str(stored.uuid))
    # Sample sd (ddof=1), as numpy computes it with ddof=1: common practice for a nested estimate's spread.
    assert record.estimate.mean == pytest.approx(np.mean(scores), rel=1e-12)
    assert record.estimate.sd == pytest.approx(np.std(scores, ddof=1), rel=1e-12)
    assert (record.estimate.n_used, record.estimate.n_folds) == (6, 6)
    [listed] = list_assessments(engine).to_dict("records")
    assert (listed["estimate_mean"], listed["estimate_sd"]) == (record.estimate.mean, record.estimate.sd)
    assert (listed["estimate_n_used"], listed["estimate_n_folds"]) == (6, 6)


def test_a_fold_where_every_configuration_failed_has_no_winner_and_counts_as_failed(engine, make_payload):
    fields = make_payload().model_dump() | {"family_winners": None, "overall_winners": None}
    inner = fields["inner_scores"]
    for row, key in enumerate(zip(inner["repeat"], inner["outer_fold"], inner["metric"], strict=True)):
        if key == (1, 0, 0):  # every configuration's selection-metric scores in repeat 1, outer fold 0
            inner["score"][row] = None
    payload = AssessmentPayload.model_validate(fields)  # the winners computed from the inner scores
    assert [(c.repeat, c.outer_fold) for c in payload.overall_winners] == [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2)]
    assert not [c for c in payload.family_winners if (c.repeat, c.outer_fold) == (1, 0)]
    insert_assessment(engine, payload)
    record = get_assessment(engine, payload.uuid)
    scores = _winner_outer_scores(payload)  # five folds with a winner; one of their outer refits failed
    used = [score for score in scores if score is not None]
    assert record.estimate.mean == pytest.approx(np.mean(used), rel=1e-12)
    assert (record.estimate.n_used, record.estimate.n_folds) == (len(used), 6)
    assert record.estimate.described == f"over {len(used)} of 6 outer folds ({6 - len(used)} failed)"


def test_the_record_holds_the_payload_description_and_counts(engine, stored):
    record = get_assessment(engine, str(stored.uuid).upper())  # any spelling of the uuid
    assert (record.uuid, record.name, record.dataset) == (str(stored.uuid), stored.name, stored.dataset)
    assert record.created_at == stored.created_at
    assert record.created_at.utcoffset() == timedelta(hours=2)
    assert record.design == stored.design
    assert record.families == stored.families
    assert record.configurations == stored.configurations
    assert record.fingerprint == stored.fingerprint()
    assert (record.versions, record.seeds, record.total_fit_time) == (stored.versions, stored.seeds,
                                                                       stored.total_fit_time)
    assert (record.n_inner_scores, record.n_outer_scores, record.n_failures) == (
        len(stored.inner_scores.score), len(stored.outer_scores.score), len(stored.failures))


def test_unknown_assessments_give_none_or_a_clear_error(engine, stored, make_payload):
    other = make_payload().uuid
    assert get_assessment(engine, str(other)) is None
    for read in (inner_scores_for, outer_scores_for, winners_for, family_winners_for, failures_for):
        with pytest.raises(AssessmentNotFound, match=str(other)):
            read(engine, str(other))


def test_failures_name_their_configuration_and_family(engine, stored):
    table = failures_for(engine, stored.uuid)
    assert list(table.columns) == ["level", "repeat", "outer_fold", "inner_fold", "family", "config", "metric",
                                   "stage", "message"]
    assert table["inner_fold"].dtype == "Int64"
    for (_, row), failure in zip(table.iterrows(), stored.failures, strict=True):
        config = stored.configurations[failure.config]
        assert (row["level"], row["repeat"], row["outer_fold"]) == (failure.level, failure.repeat,
                                                                     failure.outer_fold)
        assert (row["family"], row["config"], row["message"]) == (config.family, config.id, failure.message)
        assert (row["inner_fold"] if failure.inner_fold is not None else None) == failure.inner_fold
        expected_metric = None if failure.metric is None else stored.design.metrics[failure.metric]
        assert (row["metric"], row["stage"]) == (expected_metric, failure.stage)
    assert pd.isna(table["inner_fold"].iloc[1])


def test_list_assessments_newest_first_with_case_insensitive_filters(engine, make_payload):
    # Wall-clock order differs from the instants' order once the offsets are taken into account.
    a = make_payload(name="Ridge 50% search", dataset="Invented Coins",
                     created_at=datetime(2024, 1, 1, 10, 0, tzinfo=timezone(timedelta(hours=5))))  # 05:00 UTC
    b = make_payload(name="forest search", dataset="invented coins v2",
                     created_at=datetime(2024, 1, 1, 7, 0, tzinfo=UTC))                            # 07:00 UTC
    c = make_payload(name="knn search", dataset=None,
                     created_at=datetime(2024, 1, 1, 6, 0, tzinfo=timezone(timedelta(hours=-2))))  # 08:00 UTC
    for payload in (a, b, c):
        insert_assessment(engine, payload)

    index = list_assessments(engine)
    assert list(index.columns) == ["uuid", "name", "dataset", "created_at", "task", "n_repeats",
                                   "n_outer_folds", "n_inner_folds", "n_configs", "families",
                                   "selection_metric", "estimate_mean", "estimate_sd", "estimate_n_used",
                                   "estimate_n_folds", "estimate_low", "estimate_high"]
    assert list(index["uuid"]) == [str(c.uuid), str(b.uuid), str(a.uuid)]
    assert list(index["created_at"]) == [pd.Timestamp(p.created_at).tz_convert("UTC") for p in (c, b, a)]
    first = index.iloc[0]
    assert first["families"] == ["logistic", "tree"]
    assert (first["task"], first["n_repeats"], first["n_outer_folds"], first["n_inner_folds"],
            first["n_configs"], first["selection_metric"]) == ("classification", 2, 3, 2, 4, "accuracy")

    def uuids(**filters):
        return list(list_assessments(engine, **filters)["uuid"])

    assert uuids(dataset="COINS") == [str(b.uuid), str(a.uuid)]
    assert uuids(dataset="coins", name="FOREST") == [str(b.uuid)]
    assert uuids(name="search") == [str(c.uuid), str(b.uuid), str(a.uuid)]
    assert uuids(name="%") == [str(a.uuid)]  # a literal percent sign, not a wildcard
    assert uuids(name="n_s") == []           # nor is an underscore ("knn search" has "n s")
    assert list_assessments(engine, name="nothing like it").empty


def test_winners_on_another_metric_equal_winners_frame_on_that_metric(engine, stored):
    inner, outer = frames.inner_frame(stored), frames.outer_frame(stored)
    other = stored.design.metrics[1]
    assert_frame_equal(winners_for(engine, stored.uuid, metric=other),
                       frames.winners_frame(inner, outer, other))
    assert_frame_equal(family_winners_for(engine, stored.uuid, metric=other),
                       frames.winners_frame(inner, outer, other, flag="family_winner"))


def test_outer_scores_of_one_metric_or_of_the_winners_are_those_rows_of_the_whole_frame(engine, stored):
    whole = frames.outer_frame(stored)
    metric = stored.design.metrics[1]
    for options, keep in [({"metric": metric}, whole["metric"] == metric),
                          ({"winners": "family"}, whole["family_winner"]),
                          ({"metric": metric, "winners": "overall"}, (whole["metric"] == metric)
                           & whole["overall_winner"]),
                          ({"winners": "either"}, whole["family_winner"] | whole["overall_winner"]),
                          ({"metric": metric, "winners": "overall", "configs": [whole["config"].iloc[-1]]},
                           (whole["metric"] == metric) & (whole["overall_winner"]
                                                          | (whole["config"] == whole["config"].iloc[-1])))]:
        assert keep.any() and not keep.all()
        assert_frame_equal(outer_scores_for(engine, stored.uuid, **options),
                           whole[keep].reset_index(drop=True))


def test_an_unknown_metric_or_kind_of_winner_is_refused_naming_the_choices(engine, stored):
    with pytest.raises(ValueError, match=r"metric 'r2' was not recorded .*\['accuracy', 'neg_log_loss'\]"):
        winners_for(engine, stored.uuid, metric="r2")
    with pytest.raises(ValueError, match=r"winners must be 'family', 'overall' or 'either' .*received 'best'"):
        outer_scores_for(engine, stored.uuid, winners="best")


def test_fold_sizes_are_one_row_per_stored_outer_fold_as_the_whole_frame_gives_them(engine, stored):
    whole = frames.outer_frame(stored)
    expected = (whole[["repeat", "outer_fold", "n_train", "n_test"]].drop_duplicates(["repeat", "outer_fold"])
                .sort_values(["repeat", "outer_fold"]).set_index(["repeat", "outer_fold"]))
    assert_frame_equal(fold_sizes_for(engine, stored.uuid), expected)
    assert len(expected) == len(stored.outer_folds)
