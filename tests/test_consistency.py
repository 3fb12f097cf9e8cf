"""The payload settles its fold winners and its identity: winners left out are computed by the selection
rule, and the content digest is the same for every encoding of one assessment and differs for any
change of content.

The winners are checked against a plain loop written here (greatest mean inner score on the first
metric, the first configuration in grid order on ties, a configuration with a failed inner fit never
winning: GridSearchCV's ``best_index_`` with ``error_score=np.nan``, scikit-learn's ``_search.py``).
"""

from __future__ import annotations

import json
from datetime import UTC, datetime

import numpy as np
import pytest
from pydantic import ValidationError

from foldwise.identity import content_digest
from foldwise.payload import AssessmentPayload
from foldwise.wire import packed_body, read_packed_body

# Invented inner scores, (outer fold, config, inner fold), first metric; the second metric is their half.
# Binary fractions, so that equal sums are equal floats. Fold 0: configs 0 and 1 (family "a") tie, the
# first wins; config 3 ("b") wins overall. Fold 1: config 2 ("a") has the best scores but a failed fit;
# configs 1 and 3 tie overall, the first family wins.
FAMILIES = ["a", "a", "a", "b"]
INNER = np.array([
    [[0.75, 0.5, 0.875], [0.875, 0.75, 0.5], [0.5, 0.5, 0.5], [0.625, 0.75, 0.875]],
    [[0.5, 0.5, 0.5], [0.75, 0.625, 0.5], [0.99, np.nan, 0.99], [0.625, 0.625, 0.625]],
])
TIED_MEAN = repr(2.125 / 3)


def _document(inner: np.ndarray = INNER) -> dict:
    n_outer, n_configs, n_inner = inner.shape
    rows = [(o, i, c, m) for o in range(n_outer) for i in range(n_inner) for c in range(n_configs) for m in range(2)]
    score = [None if np.isnan(inner[o, c, i]) else float(inner[o, c, i]) / (1 + m) for o, i, c, m in rows]
    outer_rows = [(o, c, m) for o in range(n_outer) for c in range(n_configs) for m in range(2)]
    return {
        "name": "invented scores", "uuid": "6a1c93f0-51a2-4d4e-9a2c-3f0b8f2f4e11",
        "created_at": "2026-01-02T03:04:05+00:00",
        "design": {"task": "classification", "n_samples": 10, "n_repeats": 1, "n_outer_folds": n_outer,
                   "n_inner_folds": n_inner, "metrics": ["accuracy", "half accuracy"]},
        "families": [{"name": "a"}, {"name": "b"}],
        "configurations": [{"id": f"{family}:{c}", "family": family, "params": {"z": c, "k": [c, "x"]}}
                           for c, family in enumerate(FAMILIES)],
        "outer_folds": [{"repeat": 0, "outer_fold": o, "n_train": 5, "test_indices": list(range(5 * o, 5 * o + 5))}
                        for o in range(n_outer)],
        "inner_scores": {"repeat": [0] * len(rows), "outer_fold": [r[0] for r in rows],
                         "inner_fold": [r[1] for r in rows], "config": [r[2] for r in rows],
                         "metric": [r[3] for r in rows], "score": score, "fit_time": [0.5] * len(rows),
                         "score_time": [0.1] * len(rows)},
        "outer_scores": {"repeat": [0] * len(outer_rows), "outer_fold": [r[0] for r in outer_rows],
                         "config": [r[1] for r in outer_rows], "metric": [r[2] for r in outer_rows],
                         "score": [0.75] * len(outer_rows), "fit_time": [1] * len(outer_rows),
                         "score_time": [0.2] * len(outer_rows)},
    }


def _plain_winners(inner: np.ndarray) -> tuple[list[tuple[int, int]], list[tuple[int, int]]]:
    """(outer fold, config) of each family's winner and of the overall winner, by a loop over the means."""
    family_winners, overall_winners = [], []
    for fold in range(inner.shape[0]):
        best = {}
        for config, family in enumerate(FAMILIES):
            mean = sum(inner[fold, config]) / inner.shape[2]  # NaN when a fit failed: never greater
            if mean == mean and (family not in best or mean > best[family][1]):
                best[family] = (config, mean)
        family_winners += [(fold, config) for config, _ in best.values()]
        if best:
            overall_winners.append((fold, max(best.values(), key=lambda pair: pair[1])[0]))  # first on ties
    return family_winners, overall_winners


def _pairs(choices) -> list[tuple[int, int]]:
    return [(choice.outer_fold, choice.config) for choice in choices]


def test_winners_left_out_are_the_ones_a_plain_loop_chooses():
    payload = AssessmentPayload.model_validate(_document())
    family_winners, overall_winners = _plain_winners(INNER)
    assert _pairs(payload.family_winners) == family_winners == [(0, 0), (0, 3), (1, 1), (1, 3)]
    assert _pairs(payload.overall_winners) == overall_winners == [(0, 3), (1, 1)]


def test_a_fold_where_every_configuration_failed_has_no_winner():
    inner = INNER.copy()
    inner[1, :, 0] = np.nan
    payload = AssessmentPayload.model_validate(_document(inner))
    assert _pairs(payload.overall_winners) == [(0, 3)]
    assert _pairs(payload.family_winners) == [(0, 0), (0, 3)]
    doc = _document(inner) | {"overall_winners": [{"repeat": 0, "outer_fold": o, "config": 3} for o in (0, 1)]}
    with pytest.raises(ValidationError, match="every configuration failed on the selection metric"):
        AssessmentPayload.model_validate(doc)


def test_the_tie_goes_to_the_first_configuration_and_the_second_is_refused():
    doc = _document() | {"family_winners": [{"repeat": 0, "outer_fold": 0, "config": 1},
                                            {"repeat": 0, "outer_fold": 0, "config": 3},
                                            {"repeat": 0, "outer_fold": 1, "config": 1},
                                            {"repeat": 0, "outer_fold": 1, "config": 3}]}
    with pytest.raises(ValidationError) as refused:
        AssessmentPayload.model_validate(doc)
    [error] = refused.value.errors()
    assert error["loc"] == ("family_winners", 0) and error["type"] == "inconsistent_assessment"
    assert (f"names config 1 ('a:1'), inner mean {TIED_MEAN}, but the inner_scores choose config 0 ('a:0'), inner "
            f"mean {TIED_MEAN}") in error["msg"]


def test_a_search_objects_own_winners_are_kept_but_must_exist():
    """A winner chosen by the search's own rule (successive halving, a callable refit) is not the rule's."""
    doc = _document()
    doc["design"]["selected_by"] = "search"
    family, overall = ((0, 2), (0, 3), (1, 0), (1, 3)), ((0, 2), (1, 0))
    doc |= {"family_winners": [{"repeat": 0, "outer_fold": o, "config": c} for o, c in family],
            "overall_winners": [{"repeat": 0, "outer_fold": o, "config": c} for o, c in overall]}
    payload = AssessmentPayload.model_validate(doc)
    assert _pairs(payload.overall_winners) == [(0, 2), (1, 0)]
    with pytest.raises(ValidationError, match="overall_winners: required when design.selected_by is 'search'"):
        AssessmentPayload.model_validate({key: value for key, value in doc.items() if key != "overall_winners"})


def _final(inner: np.ndarray, **chosen) -> dict:
    """A final selection over every row whose inner scores are ``inner`` (config, inner fold)."""
    n_configs, n_inner = inner.shape
    rows = [(i, c, m) for i in range(n_inner) for c in range(n_configs) for m in range(2)]
    return {"n_inner_folds": n_inner, "inner_scores": {
        "inner_fold": [r[0] for r in rows], "config": [r[1] for r in rows], "metric": [r[2] for r in rows],
        "score": [None if np.isnan(inner[c, i]) else float(inner[c, i]) for i, c, _ in rows],
        "fit_time": [0.5] * len(rows), "score_time": [0.1] * len(rows)}} | chosen


def test_the_final_selections_winners_follow_from_its_scores():
    """Every row as one fold: fold 1's scores, where config 2 failed once, 1 and 3 tie and "a" comes first."""
    family_winners, overall_winners = _plain_winners(INNER[1:])
    family = [config for _, config in family_winners]
    [(_, overall)] = overall_winners
    payload = AssessmentPayload.model_validate(_document() | {"final": _final(INNER[1], family_winners=family,
                                                                              config=overall)})
    assert (payload.final.family_winners, payload.final.config) == ([1, 3], 1)
    with pytest.raises(ValidationError) as refused:
        AssessmentPayload.model_validate(_document() | {"final": _final(INNER[1], family_winners=family, config=3)})
    [error] = refused.value.errors()
    assert error["loc"] == ("final", "config")
    assert "final.config: 3, but the final.inner_scores choose 1" in error["msg"]
    incomplete = _final(INNER[1], family_winners=family, config=overall)
    for column in incomplete["inner_scores"].values():
        del column[4]
    with pytest.raises(ValidationError) as refused:
        AssessmentPayload.model_validate(_document() | {"final": incomplete})
    [error] = refused.value.errors()
    assert error["loc"] == ("final", "inner_scores")
    assert "final.inner_scores: no row for inner fold 0, config 2, metric 0" in error["msg"]


def test_the_digest_is_one_for_every_encoding_of_the_content(small_assessment):
    payload = small_assessment.payload
    digest = content_digest(payload)
    doc = json.loads(payload.model_dump_json())
    reordered = {key: doc[key] for key in reversed(doc)}
    for configuration in reordered["configurations"]:
        configuration["params"] = dict(reversed(configuration["params"].items()))
    same = [
        AssessmentPayload.model_validate_json(payload.packed_json()),  # packed score columns
        read_packed_body(b"".join(packed_body(payload))),  # the packed body with its tail of blocks
        AssessmentPayload.model_validate(reordered),  # keys in another order
        AssessmentPayload.model_validate(doc | {"schema_version": 1}),  # the lists of version 1
        AssessmentPayload.model_validate(doc | {"created_at": datetime(2001, 1, 1, tzinfo=UTC).isoformat()}),
        AssessmentPayload.model_validate({k: v for k, v in doc.items() if not k.endswith("_winners")}),
    ]
    assert [content_digest(other) for other in same] == [digest] * len(same)
    assert len(digest) == 64 and int(digest, 16) >= 0


@pytest.mark.parametrize("change", ["score", "prediction", "name", "param", "failure"])
def test_any_change_of_content_changes_the_digest(small_assessment, change):
    payload = small_assessment.payload
    doc = payload.model_dump()
    if change == "score":
        doc["outer_scores"]["score"][0] = np.nextafter(doc["outer_scores"]["score"][0], 2.0)  # one ulp
    elif change == "prediction":
        block = bytearray(doc["predictions"][0]["data"])
        block[-1] ^= 1
        doc["predictions"][0]["data"] = bytes(block)
    elif change == "name":
        doc["name"] += " "
    elif change == "param":
        doc["configurations"][0]["params"]["extra"] = None
    else:
        doc["failures"].append({"level": "outer", "repeat": 0, "outer_fold": 0, "config": 0, "message": "x"})
    assert content_digest(AssessmentPayload.model_validate(doc)) != content_digest(payload)
