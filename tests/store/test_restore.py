"""What goes in comes out: whole payloads, outer folds and predictions, exactly."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest

from foldwise.payload import AssessmentPayload, Prediction
from foldwise.store import insert_assessment, load_payload, outer_folds_for, predictions_for


def variant(payload: AssessmentPayload, design: dict | None = None, **changes) -> AssessmentPayload:
    """The payload with some fields changed, validated again as a new payload would be."""
    fields = payload.model_dump() | changes
    fields["design"] = fields["design"] | (design or {})
    return AssessmentPayload.model_validate(fields)


def _without_labels(payload):
    folds = [fold.model_dump() | {"y_true": None} for fold in payload.outer_folds]
    odd_params = {"z": 0.1 + 0.2, "a": {"y": 1e-310, "x": [True, "s"]}}  # keys out of order on purpose
    return variant(payload, created_at=datetime(2023, 12, 31, 23, 59, 59), dataset=None, predictions=[],
                   failures=[], outer_folds=folds, seeds={"nested": {"b": [1, 2.5, None], "a": 2**62}},
                   versions={}, configurations=[config.model_dump() | {"params": odd_params}
                                                for config in payload.configurations])


def _string_labels(payload):
    folds = [fold.model_dump() | {"y_true": ["yes" if label else "no" for label in fold.y_true]}
             for fold in payload.outer_folds]
    return variant(payload, design={"classes": ["no", "yes"]}, outer_folds=folds,
                   created_at=datetime(2024, 2, 29, 12, 0, tzinfo=UTC))


def _regression(payload):
    folds = [fold.model_dump() | {"y_true": [label + 0.25 for label in fold.y_true]}
             for fold in payload.outer_folds]
    return variant(payload, design={"task": "regression", "classes": None, "metrics": ["r2", "neg_mae"]},
                   outer_folds=folds, predictions=[p.model_dump() | {"kind": "predict"}
                                                   for p in payload.predictions])


@pytest.mark.parametrize("change", [None, _without_labels, _string_labels, _regression],
                         ids=["as built", "no labels, naive time", "string labels, UTC", "regression"])
def test_load_payload_gives_back_the_payload_it_was_given(engine, make_payload, change):
    payload = make_payload() if change is None else change(make_payload())
    insert_assessment(engine, payload)
    loaded = load_payload(engine, str(payload.uuid))
    assert loaded == payload
    # The same JSON text: field order, key order, number spelling and the time zone all survive.
    assert loaded.model_dump_json() == payload.model_dump_json()


def test_load_payload_of_an_unknown_uuid_is_none(engine, make_payload):
    assert load_payload(engine, make_payload().uuid) is None


def test_outer_folds_come_back_in_payload_order(engine, make_payload):
    payload = make_payload()
    shuffled = variant(payload, outer_folds=[fold.model_dump() for fold in reversed(payload.outer_folds)])
    insert_assessment(engine, shuffled)
    assert outer_folds_for(engine, shuffled.uuid) == shuffled.outer_folds


def test_predictions_come_back_bit_exact(engine, make_payload):
    payload = make_payload()
    odd = payload.predictions[0].array().copy()
    # A NaN carrying payload bits, which a trip through text or float arithmetic could lose.
    odd[1, 0] = np.frombuffer(np.uint64(0x7FF8_0000_DEAD_BEEF).tobytes(), dtype="<f8")[0]
    odd[2, 1] = np.inf
    first = Prediction.from_array(odd, repeat=0, outer_fold=0, config=0, kind="proba")
    rest = [prediction.model_dump() for prediction in payload.predictions[1:]]
    payload = variant(payload, predictions=[first.model_dump(), *rest])
    insert_assessment(engine, payload)

    stored = predictions_for(engine, payload.uuid)
    assert len(stored) == len(payload.predictions)
    for kept, sent in zip(stored, payload.predictions, strict=True):
        assert (kept.repeat, kept.outer_fold, kept.kind) == (sent.repeat, sent.outer_fold, sent.kind)
        assert kept.config == payload.configurations[sent.config].id
        assert kept.values.dtype == np.float64
        assert kept.values.shape == (len(payload.outer_folds[0].test_indices), 2)
        assert kept.values.tobytes() == sent.data


def test_predictions_of_chosen_configurations(engine, make_payload):
    payload = make_payload()
    insert_assessment(engine, payload)
    wanted = [payload.configurations[3].id, payload.configurations[1].id]
    stored = predictions_for(engine, payload.uuid, configs=wanted)
    sent = [p for p in payload.predictions if payload.configurations[p.config].id in wanted]
    assert [(p.repeat, p.outer_fold, p.config) for p in stored] == [
        (p.repeat, p.outer_fold, payload.configurations[p.config].id) for p in sent]
    assert predictions_for(engine, payload.uuid, configs=[]) == []
    with pytest.raises(ValueError, match=r"configs \['tree:nothing'\] are not configurations"):
        predictions_for(engine, payload.uuid, configs=["tree:nothing"])
