"""foldwise.load and foldwise.assessments: an assessment read back from a store equals the one saved."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import foldwise
from foldwise.store import final_selection_for, make_engine


def _frames(assessment):
    return {"inner_scores": assessment.inner_scores, "outer_scores": assessment.outer_scores,
            "winners": assessment.winners, "family_winners": assessment.family_winners,
            "summary": assessment.summary(), "failures": _failures(assessment)}


def _failures(assessment):
    return pd.DataFrame([failure.model_dump() for failure in assessment.payload.failures])


def test_an_assessment_loads_back_as_it_was_saved(store_url, small_assessment):
    assert small_assessment.save(store_url)
    loaded = foldwise.load(store_url, small_assessment.uuid)
    for name, frame in _frames(small_assessment).items():
        pd.testing.assert_frame_equal(_frames(loaded)[name], frame, check_exact=True, obj=name)
    assert loaded.nested_estimate == small_assessment.nested_estimate
    assert loaded.payload == small_assessment.payload
    for saved, back in zip(small_assessment.payload.predictions, loaded.payload.predictions, strict=True):
        np.testing.assert_array_equal(back.array(), saved.array())


def test_assessments_lists_the_store_with_fold_counts(store_url, small_assessment):
    small_assessment.save(store_url)
    listing = foldwise.assessments(store_url)
    [row] = listing.to_dict("records")
    assert row["uuid"] == small_assessment.uuid and row["name"] == small_assessment.name
    assert (row["estimate_n_used"], row["estimate_n_folds"]) == (3, 3)
    assert row["estimate_mean"] == small_assessment.nested_estimate.mean
    assert foldwise.assessments(store_url, name="no such name").empty


def test_an_unknown_uuid_is_a_lookup_error_naming_the_store(store_url, small_assessment):
    small_assessment.save(store_url)
    with pytest.raises(LookupError, match="holds no assessment 00000000-0000-0000-0000-000000000000"):
        foldwise.load(store_url, "00000000-0000-0000-0000-000000000000")


def test_reading_a_missing_store_file_creates_nothing(tmp_path):
    missing = tmp_path / "typo.db"
    with pytest.raises(FileNotFoundError, match="reading never creates one"):
        foldwise.assessments(str(missing))
    with pytest.raises(FileNotFoundError):
        foldwise.load(str(missing), "00000000-0000-0000-0000-000000000000")
    assert not missing.exists()


def test_the_final_selection_and_its_model_load_back_on_each_backend(store_url):
    from sklearn.datasets import load_wine
    from sklearn.tree import DecisionTreeClassifier

    X, y = load_wine(return_X_y=True)  # bundled open data
    assessment = foldwise.nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})},
                                    X, y, outer=2, inner=2, n_jobs=1, progress=False, final=True)
    assessment.save(store_url)
    loaded = foldwise.load(store_url, assessment.uuid)
    assert loaded.payload == assessment.payload
    assert loaded.final_choice == assessment.final_choice is not None
    np.testing.assert_array_equal(loaded.final_model.predict_proba(X), assessment.final_model.predict_proba(X))
    engine = make_engine(store_url)
    try:
        stored = final_selection_for(engine, assessment.uuid)
    finally:
        engine.dispose()
    assert stored.has_model and stored.selection == assessment.payload.final.model_copy(update={"model_skops": None})
