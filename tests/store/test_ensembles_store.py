"""Saved ensembles and the skops files they are built from, in a real store (SQLite file and PostgreSQL)."""

from __future__ import annotations

import base64

import pytest
import skops.io
from alembic import command
from alembic.config import Config
from sklearn.linear_model import LogisticRegression
from sqlalchemy import create_engine, inspect, text

import foldwise.store
from foldwise.payload import AssessmentPayload, FittedModel
from foldwise.store import (
    delete_assessment,
    delete_ensemble,
    ensemble_counts,
    ensemble_members_for,
    ensembles_for,
    family_estimators_for,
    fitted_model_counts,
    fitted_models_for,
    get_ensemble,
    insert_assessment,
    insert_ensemble,
    load_payload,
    make_engine,
)

LOGISTIC_C01, LOGISTIC_C1 = 'logistic:{"C":0.1}', 'logistic:{"C":1.0,"class_weight":null}'
TREE_2 = 'tree:{"max_depth":2}'


def row_count(url: str, table: str) -> int:
    """Rows of a table, counted with plain SQL on a connection of its own rather than through the store."""
    raw = create_engine(url)
    try:
        with raw.connect() as connection:
            return connection.execute(text(f"SELECT count(*) FROM {table}")).scalar_one()
    finally:
        raw.dispose()


def _b64(data: bytes) -> str:
    return base64.b64encode(data).decode("ascii")


def with_skops(payload: AssessmentPayload) -> AssessmentPayload:
    """The payload with a skops file for its first family and two kept fold models (real skops bytes)."""
    fields = payload.model_dump()
    fields["families"][0]["estimator_skops"] = _b64(skops.io.dumps(LogisticRegression(max_iter=500)))
    fields["models"] = [FittedModel(repeat=0, outer_fold=o, config=0, skops=_b64(f"model {o}".encode()))
                        .model_dump() for o in (0, 2)]
    return AssessmentPayload.model_validate(fields)


def save(engine, payload, name="winners", members=(LOGISTIC_C01, TREE_2), note="first try"):
    return insert_ensemble(engine, str(payload.uuid), name=name, note=note, members=list(members),
                           voting="soft", metric="accuracy", estimate_mean=0.8, estimate_sd=None)


def test_a_saved_ensemble_reads_back_with_its_members_in_order(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    saved = save(engine, payload, members=[TREE_2, LOGISTIC_C01])
    assert saved.members == [TREE_2, LOGISTIC_C01]
    assert (saved.name, saved.note) == ("winners", "first try")
    assert (saved.voting, saved.metric) == ("soft", "accuracy")
    assert (saved.estimate_mean, saved.estimate_sd) == (0.8, None)
    assert saved.assessment_uuid == str(payload.uuid)
    assert saved.created_at.tzinfo is not None
    assert get_ensemble(engine, saved.id) == saved
    assert get_ensemble(engine, saved.id.upper()) == saved
    second = save(engine, payload, name="all logistic", members=[LOGISTIC_C01, LOGISTIC_C1])
    assert [e.id for e in ensembles_for(engine, str(payload.uuid))] == [saved.id, second.id]
    assert ensemble_counts(engine) == {str(payload.uuid): 2}


def test_ensembles_survive_a_new_engine_on_the_same_store(store_url, engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    saved = save(engine, payload)
    engine.dispose()
    reopened = make_engine(store_url)
    assert get_ensemble(reopened, saved.id) == saved
    reopened.dispose()


def test_bad_ensembles_are_refused_naming_the_problem_and_nothing_is_written(engine, store_url, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    with pytest.raises(ValueError, match=r"\['nope'\] are not configurations"):
        save(engine, payload, members=[LOGISTIC_C01, "nope"])
    with pytest.raises(ValueError, match="distinct configuration ids"):
        save(engine, payload, members=[TREE_2, TREE_2])
    with pytest.raises(ValueError, match="distinct configuration ids"):
        save(engine, payload, members=[])
    with pytest.raises(ValueError, match="a name of 1 to 200"):
        save(engine, payload, name="  ")
    assert row_count(store_url, "ensembles") == row_count(store_url, "ensemble_members") == 0


def test_delete_removes_the_ensemble_and_its_members(engine, store_url, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    gone, kept = save(engine, payload), save(engine, payload, name="kept")
    assert delete_ensemble(engine, gone.id) is True
    assert delete_ensemble(engine, gone.id) is False
    assert delete_ensemble(engine, "not-a-uuid") is False
    assert get_ensemble(engine, gone.id) is None and get_ensemble(engine, "not-a-uuid") is None
    assert get_ensemble(engine, kept.id) == kept
    assert row_count(store_url, "ensemble_members") == len(kept.members)


def test_deleting_the_assessment_cascades_to_its_ensembles(engine, store_url, make_payload):
    payload, other = make_payload(seed=1), make_payload(seed=2)
    insert_assessment(engine, payload)
    insert_assessment(engine, other)
    save(engine, payload)
    kept = save(engine, other)
    delete_assessment(engine, str(payload.uuid))
    assert [row_count(store_url, t) for t in ("ensembles", "ensemble_members")] == [1, len(kept.members)]
    assert ensemble_counts(engine) == {str(other.uuid): 1}


def test_member_rows_for_the_csv_export(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    saved = save(engine, payload, members=[TREE_2, LOGISTIC_C1])
    frame = ensemble_members_for(engine, str(payload.uuid))
    assert frame["config"].tolist() == [TREE_2, LOGISTIC_C1]
    assert frame["family"].tolist() == ["tree", "logistic"]
    assert frame["member"].tolist() == [0, 1]
    assert frame["params"].tolist() == [{"max_depth": 2}, {"C": 1.0, "class_weight": None}]
    assert set(frame["ensemble_id"]) == {saved.id} and set(frame["note"]) == {"first try"}


def test_skops_files_and_kept_models_round_trip_exactly(engine, make_payload):
    payload = with_skops(make_payload())
    insert_assessment(engine, payload)
    assert load_payload(engine, str(payload.uuid)).model_dump_json() == payload.model_dump_json()
    estimators = family_estimators_for(engine, str(payload.uuid))
    assert estimators["tree"] is None
    assert base64.b64decode(payload.families[0].estimator_skops) == estimators["logistic"]
    models = fitted_models_for(engine, str(payload.uuid), configs=[LOGISTIC_C01, TREE_2])
    assert [(m.repeat, m.outer_fold, m.config, m.skops) for m in models] == [
        (0, 0, LOGISTIC_C01, b"model 0"), (0, 2, LOGISTIC_C01, b"model 2")]
    assert fitted_models_for(engine, str(payload.uuid), configs=[TREE_2]) == []
    assert fitted_model_counts(engine, str(payload.uuid)) == {LOGISTIC_C01: 2}
    with pytest.raises(ValueError, match="not configurations"):
        fitted_models_for(engine, str(payload.uuid), configs=["tree:{}"])


def test_the_payload_refuses_a_model_of_an_unknown_fold_or_given_twice(make_payload):
    fields = with_skops(make_payload()).model_dump()
    fields["models"][1] = fields["models"][0]
    with pytest.raises(ValueError, match=r"models\[1\]: repeat 0, outer fold 0, config 0 appears twice"):
        AssessmentPayload.model_validate(fields)
    fields["models"] = [fields["models"][0] | {"outer_fold": 7}]
    with pytest.raises(ValueError, match=r"models\[0\]: repeat 0, outer fold 7 is not in outer_folds"):
        AssessmentPayload.model_validate(fields)
    fields["models"] = [fields["models"][0] | {"outer_fold": 0, "skops": "not base64!"}]
    with pytest.raises(ValueError, match=r"models\[0\].skops: not base64"):
        AssessmentPayload.model_validate(fields)


def test_a_store_made_before_ensembles_upgrades_and_keeps_its_assessments(store_url, engine, make_payload):
    # Down to the first schema with an assessment in it, then make_engine migrates it up again.
    payload = make_payload()
    insert_assessment(engine, payload)
    config = Config()
    config.set_main_option("script_location", str(foldwise.store.engine._MIGRATIONS))
    with engine.begin() as connection:
        config.attributes["connection"] = connection
        command.downgrade(config, "0001")
    with engine.connect() as connection:
        schema = inspect(connection)
        assert {"ensembles", "ensemble_members", "fitted_models"}.isdisjoint(schema.get_table_names())
        assert "estimator_skops" not in {column["name"] for column in schema.get_columns("families")}
    engine.dispose()
    upgraded = make_engine(store_url)
    assert load_payload(upgraded, str(payload.uuid)) == payload
    assert ensembles_for(upgraded, str(payload.uuid)) == []
    upgraded.dispose()
