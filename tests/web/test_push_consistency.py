"""Assessments that contradict themselves are refused at the edge, through the real push route (a TestClient
on a real SQLite file, JSON and packed bodies alike) and through ``save()``: each case names the JSON
path of its first problem, and nothing is stored, so the pages that crashed on such data never see it.

The valid starting point is a real nested CV (the ``small_assessment`` fixture: scikit-learn's bundled
breast-cancer data, 2 families, 5 configurations, 3 outer × 3 inner folds, 2 metrics); each case breaks
one rule of ``foldwise.consistency``. Every case here was stored with ``201`` before those rules.
"""

from __future__ import annotations

import base64
import copy
import json
import sqlite3

import numpy as np
import pytest
from pydantic import ValidationError

from foldwise.client import save
from foldwise.payload import AssessmentPayload, FoldChoice
from foldwise.store import UuidConflict
from foldwise.wire import CONTENT_TYPE, packed_body

JSON = {"content-type": "application/json"}


@pytest.fixture(scope="module")
def valid_document(small_assessment) -> dict:
    return json.loads(small_assessment.payload.model_dump_json())


def _rows(block: dict) -> list[dict]:
    return [dict(zip(block, values, strict=True)) for values in zip(*block.values(), strict=True)]


def _columns(rows: list[dict], names) -> dict:
    return {name: [row[name] for row in rows] for name in names}


def _inner_means(doc: dict, repeat: int, outer_fold: int) -> dict[int, float]:
    """Each configuration's mean inner score on the first metric in one fold: a plain loop, no foldwise."""
    scores: dict[int, list] = {}
    for row in _rows(doc["inner_scores"]):
        if (row["repeat"], row["outer_fold"], row["metric"]) == (repeat, outer_fold, 0):
            scores.setdefault(row["config"], []).append(row["score"])
    return {config: np.nan if None in values else float(np.mean(values)) for config, values in scores.items()}


def _family_of(doc: dict, config: int) -> str:
    return doc["configurations"][config]["family"]


def _other_family_winner(doc: dict) -> None:
    """Name as fold 0's overall winner the winner of the other family in that fold."""
    overall = doc["overall_winners"][0]
    rival = next(c for c in doc["family_winners"] if (c["repeat"], c["outer_fold"]) == (0, 0)
                 and _family_of(doc, c["config"]) != _family_of(doc, overall["config"]))
    overall["config"] = rival["config"]


def _other_config_of_the_family(doc: dict) -> None:
    choice = doc["family_winners"][0]
    family = _family_of(doc, choice["config"])
    choice["config"] = next(c for c, config in enumerate(doc["configurations"])
                            if config["family"] == family and c != choice["config"])


def _drop_inner_row(doc: dict) -> None:
    rows = _rows(doc["inner_scores"])
    del rows[7]
    doc["inner_scores"] = _columns(rows, doc["inner_scores"])


def _overlapping_test_folds(doc: dict) -> None:
    doc["outer_folds"][1]["test_indices"][0] = doc["outer_folds"][0]["test_indices"][0]


def _more_outer_folds_declared(doc: dict) -> None:
    doc["design"]["n_outer_folds"] = 5


def _fold_without_overall_winner(doc: dict) -> None:
    del doc["overall_winners"][1]


def _duplicated_row(block: str):
    def duplicating(doc: dict) -> None:
        rows = _rows(doc[block])
        doc[block] = _columns([*rows, rows[5]], doc[block])
    return duplicating


def _two_overall_winners(doc: dict) -> None:
    doc["overall_winners"].append(dict(doc["overall_winners"][0]))


def _set(*path_and_value):
    *path, value = path_and_value

    def setting(doc: dict) -> None:
        target = doc
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value
    return setting


def _no_scores_and_an_empty_metric_name(doc: dict) -> None:
    doc["design"]["metrics"] = [""]
    for block in ("inner_scores", "outer_scores"):
        doc[block] = {name: [] for name in doc[block]}


def _no_scores(doc: dict) -> None:
    doc["design"]["metrics"] = ["roc_auc"]
    for block in ("inner_scores", "outer_scores"):
        doc[block] = {name: [] for name in doc[block]}


def _winner_where_every_configuration_failed(doc: dict) -> None:
    inner = doc["inner_scores"]
    for row, key in enumerate(zip(inner["repeat"], inner["outer_fold"], inner["metric"], strict=True)):
        if key == (0, 2, 0):
            inner["score"][row] = None


def _duplicated_prediction(doc: dict) -> None:
    doc["predictions"].append(dict(doc["predictions"][0]))


def _winner_not_refit(doc: dict) -> None:
    doc["design"]["refit_all"] = False
    winner = doc["overall_winners"][0]
    rows = [row for row in _rows(doc["outer_scores"])
            if (row["repeat"], row["outer_fold"], row["config"]) != (0, 0, winner["config"])]
    doc["outer_scores"] = _columns(rows, doc["outer_scores"])


def _inner_key(doc: dict, row: int) -> str:
    inner = doc["inner_scores"]
    return (f"repeat {inner['repeat'][row]}, outer fold {inner['outer_fold'][row]}, inner fold "
            f"{inner['inner_fold'][row]}, config {inner['config'][row]}, metric {inner['metric'][row]}")


# case: (mutation, JSON path of the first problem, what its message says; {names} filled from the document)
CASES = {
    "overall winner the inner scores do not choose": (
        _other_family_winner, ["overall_winners", 0],
        "overall_winners[0]: repeat 0, outer fold 0 names config {named} ({named_id}), inner mean {named_mean}, but "
        "the inner_scores choose config {chosen} ({chosen_id}), inner mean {chosen_mean}"),
    "family winner the inner scores do not choose": (
        _other_config_of_the_family, ["family_winners", 0], "family_winners[0]: repeat 0, outer fold 0 names "),
    "incomplete grid": (_drop_inner_row, ["inner_scores"], "inner_scores: no row for {row_7}"),
    "overlapping test folds": (_overlapping_test_folds, ["outer_folds", 1, "test_indices", 0],
                               "outer_folds[1].test_indices: row {row} is tested twice in repeat 0"),
    "n_outer_folds 5 with 3 folds sent": (
        _more_outer_folds_declared, ["outer_folds"],
        "outer_folds: repeat 0, outer fold 3 is missing: design.n_repeats 1 × design.n_outer_folds 5 makes 5 "
        "outer folds, and 3 were sent (and "),
    "a fold without an overall winner": (
        _fold_without_overall_winner, ["overall_winners"],
        "overall_winners: repeat 0, outer fold 1 has no overall winner; the inner_scores choose config"),
    "two overall winners for one fold": (_two_overall_winners, ["overall_winners", 3],
                                         "overall_winners[3]: a second overall winner for repeat 0, outer fold 0"),
    "duplicated inner row": (_duplicated_row("inner_scores"), ["inner_scores", "score", "{n_inner}"],
                             "inner_scores.score[{n_inner}]: {row_5} appears twice (first at row 5)"),
    "duplicated outer row": (_duplicated_row("outer_scores"), ["outer_scores", "score", "{n_outer}"],
                             "appears twice (first at row 5)"),
    "JSON false as a position": (_set("inner_scores", "config", 0, False), ["inner_scores", "config", 0],
                                 "Input should be a valid integer"),
    "JSON false as a count": (_set("design", "n_inner_folds", False), ["design", "n_inner_folds"],
                              "Input should be a valid integer"),
    "JSON true as a fold winner": (_set("overall_winners", 0, "config", True), ["overall_winners", 0, "config"],
                                   "Input should be a valid integer"),
    "score sent as the string 0.8": (_set("inner_scores", "score", 0, "0.8"), ["inner_scores", "score", 0],
                                     "Input should be a valid number"),
    "count sent as a string": (_set("outer_folds", 0, "n_train", "190"), ["outer_folds", 0, "n_train"],
                               "Input should be a valid integer"),
    "empty score columns with an empty metric name": (_no_scores_and_an_empty_metric_name,
                                                      ["design", "metrics", 0], "at least 1 character"),
    "empty score columns": (_no_scores, ["inner_scores"], "inner_scores: no row for repeat 0, outer fold 0, "
                                                          "inner fold 0, config 0, metric 0"),
    "a winner in a fold where every configuration failed": (
        _winner_where_every_configuration_failed, ["family_winners", "{family_2}"],
        "family_winners[{family_2}]: repeat 0, outer fold 2, family {family_2_name} names config {family_2_config} "
        "({family_2_id}), but every configuration of the family failed on the selection metric in the inner_scores "
        "there, so it has no winner (and 2 other problems"),
    "two prediction blocks for one fold and configuration": (
        _duplicated_prediction, ["predictions", "{n_predictions}"], "has a block already (predictions[0])"),
    "a family winner not refit without refit_all": (
        _winner_not_refit, ["outer_scores"], "outer_scores: no row for repeat 0, outer fold 0, config {winner_0}, "
                                             "metric 0, a family winner"),
}


def _expected(valid: dict, case: str) -> tuple[list, str]:
    mutate, loc, message = CASES[case]
    overall = valid["overall_winners"][0]["config"]
    rival = next(c["config"] for c in valid["family_winners"] if (c["repeat"], c["outer_fold"]) == (0, 0)
                 and _family_of(valid, c["config"]) != _family_of(valid, overall))
    means = _inner_means(valid, 0, 0)
    names = {"named": rival, "named_mean": repr(means[rival]), "chosen": overall, "chosen_mean": repr(means[overall]),
             "named_id": repr(valid["configurations"][rival]["id"]),
             "chosen_id": repr(valid["configurations"][overall]["id"]),
             "row_7": _inner_key(valid, 7), "row_5": _inner_key(valid, 5),
             "row": valid["outer_folds"][0]["test_indices"][0], "n_inner": len(valid["inner_scores"]["score"]),
             "n_outer": len(valid["outer_scores"]["score"]), "n_predictions": len(valid["predictions"]),
             "winner_0": overall}
    family_2 = next(k for k, c in enumerate(valid["family_winners"]) if (c["repeat"], c["outer_fold"]) == (0, 2))
    config = valid["family_winners"][family_2]["config"]
    names |= {"family_2": family_2, "family_2_config": config, "family_2_name": repr(_family_of(valid, config)),
              "family_2_id": repr(valid["configurations"][config]["id"])}
    loc = [int(part.format(**names)) if isinstance(part, str) and part.startswith("{") else part for part in loc]
    return loc, message.format(**names)


def _broken(valid: dict, case: str) -> dict:
    doc = copy.deepcopy(valid)
    CASES[case][0](doc)
    return doc


def test_the_fold_winners_sent_are_the_ones_the_rule_chooses(valid_document):
    """The runner's winners equal a plain loop's over the inner scores (greatest mean on the first metric,
    the first configuration in grid order on ties, as GridSearchCV's best_index_): the case above breaks
    a consistent assessment."""
    for choice in valid_document["overall_winners"]:
        means = _inner_means(valid_document, choice["repeat"], choice["outer_fold"])
        assert choice["config"] == max(means, key=lambda config: (means[config], -config))


@pytest.mark.parametrize("case", list(CASES))
def test_an_inconsistent_push_is_refused_naming_its_path(client, valid_document, case):
    loc, message = _expected(valid_document, case)
    response = client.post("/api/assessments", content=json.dumps(_broken(valid_document, case)), headers=JSON)
    assert response.status_code == 422, response.text
    first = response.json()["detail"][0]
    assert first["loc"] == ["body", *loc], first
    assert message in first["msg"], first["msg"]
    assert client.get("/api/assessments").json() == [], "a refused push left rows behind"


def _packed_body(doc: dict) -> bytes:
    """The packed body (foldwise.wire) of a document as another sender would build it: score columns as
    little-endian blocks, prediction blocks in the tail."""
    header, tail = copy.deepcopy(doc), []
    for prediction in header["predictions"]:
        block = base64.b64decode(prediction["data"])
        prediction["data"] = {"offset": sum(map(len, tail)), "size": len(block)}
        tail.append(block)
    for block in ("inner_scores", "outer_scores"):
        for name, values in header[block].items():
            dtype = "float64" if name in ("score", "fit_time", "score_time") else "int32"
            data = np.array(values, dtype="<f8" if dtype == "float64" else "<i4").tobytes()
            header[block][name] = {"dtype": dtype, "data": base64.b64encode(data).decode("ascii")}
    text = json.dumps(header).encode()
    return b"FOLDWISE" + len(text).to_bytes(8, "little") + text + b"".join(tail)


@pytest.mark.parametrize("case", [case for case in CASES if "JSON" not in case and "string" not in case])
def test_an_inconsistent_packed_push_is_refused_the_same_way(client, valid_document, case):
    """Packed columns carry their type in their dtype (so no JSON false or text there); the rules apply alike."""
    loc, message = _expected(valid_document, case)
    body = _packed_body(_broken(valid_document, case))
    response = client.post("/api/assessments", content=body, headers={"content-type": CONTENT_TYPE})
    assert response.status_code == 422, response.text
    first = response.json()["detail"][0]
    assert first["loc"] == ["body", *loc], first
    assert message in first["msg"], first["msg"]
    assert client.get("/api/assessments").json() == []


def test_the_packed_body_of_a_valid_document_is_stored(client, valid_document):
    """The packed bodies above are refused for what the case broke, not for how they were built."""
    response = client.post("/api/assessments", content=_packed_body(valid_document),
                           headers={"content-type": CONTENT_TYPE})
    assert response.status_code == 201, response.text


PAGES = ["/assessments/{uuid}/distributions", "/assessments/{uuid}/inner", "/assessments/{uuid}/ranking",
         "/api/assessments/{uuid}/distributions", "/api/assessments/{uuid}/inner", "/api/assessments/{uuid}/ranking",
         "/api/compare?x={uuid}&y={uuid}"]


@pytest.mark.parametrize("case", ["duplicated inner row", "duplicated outer row", "two overall winners for one fold"])
def test_the_pages_that_crashed_on_duplicates_never_receive_them(client, valid_document, case):
    doc = _broken(valid_document, case)
    assert client.post("/api/assessments", content=json.dumps(doc), headers=JSON).status_code == 422
    for page in PAGES:
        response = client.get(page.format(uuid=doc["uuid"]))
        assert response.status_code == 404, f"{page}: {response.status_code}"


# save(): a payload changed after it was built is checked again before it is stored

def _changed_winner(payload: AssessmentPayload) -> str:
    first = payload.overall_winners[0]
    rival = next(c.config for c in payload.family_winners
                 if (c.repeat, c.outer_fold) == (first.repeat, first.outer_fold) and c.config != first.config)
    payload.overall_winners[0] = FoldChoice(repeat=first.repeat, outer_fold=first.outer_fold, config=rival)
    return "overall_winners[0]: repeat 0, outer fold 0 names config"


def _appended_inner_row(payload: AssessmentPayload) -> str:
    inner = payload.inner_scores
    for name in type(inner).model_fields:
        column = getattr(inner, name)
        setattr(inner, name, np.append(column, column[5]))
    return f"inner_scores.score[{len(inner) - 1}]: "


def _removed_outer_fold(payload: AssessmentPayload) -> str:
    payload.design.n_outer_folds = 4
    return "outer_folds: repeat 0, outer fold 3 is missing"


def _test_row_twice(payload: AssessmentPayload) -> str:
    payload.outer_folds[1].test_indices[0] = payload.outer_folds[0].test_indices[0]
    return "outer_folds[1].test_indices: row"


@pytest.mark.parametrize("change", [_changed_winner, _appended_inner_row, _removed_outer_fold, _test_row_twice])
def test_save_refuses_a_payload_changed_into_an_inconsistent_one(tmp_path, small_assessment, change):
    payload = small_assessment.payload.model_copy(deep=True)
    message = change(payload)
    with pytest.raises(ValidationError, match="inconsistent_assessment") as refused:
        save(payload, str(tmp_path / "store.db"))
    assert message in refused.value.errors()[0]["msg"]


def test_save_computes_winners_left_out(tmp_path, small_assessment):
    payload = small_assessment.payload.model_copy(deep=True)
    payload.family_winners = payload.overall_winners = None
    assert save(payload, str(tmp_path / "store.db"))
    assert payload.overall_winners == small_assessment.payload.overall_winners
    assert payload.family_winners == small_assessment.payload.family_winners


# A uuid is an assessment: the same content again is a retry, other content a conflict

def test_a_json_push_with_winners_left_out_gets_the_runners_winners(client, valid_document, small_assessment):
    doc = {key: value for key, value in valid_document.items() if not key.endswith("_winners")}
    assert client.post("/api/assessments", content=json.dumps(doc), headers=JSON).status_code == 201
    winners = client.get(f"/api/assessments/{doc['uuid']}/winners").json()
    expected = {(c.repeat, c.outer_fold, small_assessment.payload.configurations[c.config].id)
                for c in small_assessment.payload.overall_winners}
    assert {(w["repeat"], w["outer_fold"], w["config"]) for w in winners} == expected


def test_the_same_content_again_is_a_retry_in_either_form(client, small_assessment, valid_document):
    payload = small_assessment.payload
    assert client.post("/api/assessments", content=payload.model_dump_json(), headers=JSON).status_code == 201
    again = [(b"".join(packed_body(payload)), CONTENT_TYPE), (payload.packed_json(), "application/json"),
             (json.dumps(valid_document | {"created_at": "2001-02-03T04:05:06Z"}), "application/json"),
             (json.dumps({k: v for k, v in valid_document.items() if not k.endswith("_winners")}), "application/json")]
    for body, kind in again:
        response = client.post("/api/assessments", content=body, headers={"content-type": kind})
        assert (response.status_code, response.json()["created"]) == (200, False), response.text


def test_other_content_under_a_stored_uuid_is_a_conflict(client, valid_document):
    assert client.post("/api/assessments", content=json.dumps(valid_document), headers=JSON).status_code == 201
    before = client.get(f"/api/assessments/{valid_document['uuid']}").json()
    changed = copy.deepcopy(valid_document)
    changed["name"] = "the same uuid, another assessment"
    response = client.post("/api/assessments", content=json.dumps(changed), headers=JSON)
    assert response.status_code == 409, response.text
    [entry] = response.json()["detail"]
    assert entry["loc"] == ["body", "uuid"] and entry["type"] == "uuid_conflict"
    assert valid_document["uuid"] in entry["msg"] and "different content" in entry["msg"]
    assert client.get(f"/api/assessments/{valid_document['uuid']}").json() == before  # nothing replaced


def test_save_raises_on_other_content_under_a_stored_uuid(tmp_path, small_assessment):
    target = str(tmp_path / "store.db")
    assert save(small_assessment.payload, target) is True
    assert save(small_assessment.payload.model_copy(deep=True), target) is False  # the same content again
    changed = small_assessment.payload.model_copy(deep=True)
    changed.total_fit_time += 1.0
    with pytest.raises(UuidConflict, match=str(small_assessment.uuid)):
        save(changed, target)


def _forget_digest(db_path, uuid: str) -> None:
    """As an assessment stored before content digests were kept (before migration 0005) has it."""
    with sqlite3.connect(db_path) as connection:
        connection.execute("UPDATE assessments SET content_digest = NULL WHERE uuid = ?", (uuid,))


def _digest(db_path, uuid: str) -> str | None:
    with sqlite3.connect(db_path) as connection:
        return connection.execute("SELECT content_digest FROM assessments WHERE uuid = ?", (uuid,)).fetchone()[0]


def test_an_assessment_stored_before_digests_is_compared_by_its_rows(client, db_path, small_assessment):
    payload, uuid = small_assessment.payload, str(small_assessment.uuid)
    assert client.post("/api/assessments", content=payload.model_dump_json(), headers=JSON).status_code == 201
    digest = _digest(db_path, uuid)
    assert digest is not None and len(digest) == 64
    _forget_digest(db_path, uuid)
    assert client.post("/api/assessments", content=payload.model_dump_json(), headers=JSON).status_code == 200
    assert _digest(db_path, uuid) == digest  # worked out from the stored rows, and kept
    _forget_digest(db_path, uuid)
    changed = payload.model_copy(update={"name": "another"})
    response = client.post("/api/assessments", content=changed.model_dump_json(), headers=JSON)
    assert response.status_code == 409, response.text


def test_a_stored_assessment_todays_rules_refuse_cannot_be_compared(client, db_path, small_assessment):
    payload, uuid = small_assessment.payload, str(small_assessment.uuid)
    assert client.post("/api/assessments", content=payload.model_dump_json(), headers=JSON).status_code == 201
    _forget_digest(db_path, uuid)
    with sqlite3.connect(db_path) as connection:  # an old store's row: a fold winner gone
        connection.execute("DELETE FROM fold_choices WHERE kind = 'overall' AND position = 0 AND assessment_id = "
                           "(SELECT id FROM assessments WHERE uuid = ?)", (uuid,))
    response = client.post("/api/assessments", content=payload.model_dump_json(), headers=JSON)
    assert response.status_code == 409, response.text
    assert "cannot be compared" in response.json()["detail"][0]["msg"]
