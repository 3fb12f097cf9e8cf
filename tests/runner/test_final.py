"""The final selection on every row, against GridSearchCV fitted on every row (scikit-learn as the reference)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes, load_wine
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import GridSearchCV, GroupKFold, KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise


def _reference_scores(search: GridSearchCV, n_folds: int) -> np.ndarray:
    """cv_results_ as (candidate, inner fold)."""
    return np.column_stack([search.cv_results_[f"split{i}_test_score"] for i in range(n_folds)])


def test_one_family_equals_gridsearchcv_on_every_row():
    X, y = load_wine(return_X_y=True)  # bundled open data
    estimator = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    grid = {"logisticregression__C": [0.01, 0.1, 1.0, 10.0]}
    assessment = foldwise.nested_cv({"logistic": (estimator, grid)}, X, y, outer=3, inner=4, n_jobs=1,
                                    progress=False, final=True)
    search = GridSearchCV(estimator, grid, cv=4).fit(X, y)  # the reference: what the final selection must be
    scores = assessment.final_scores.pivot(index="config", columns="inner_fold", values="score")
    ids = [config.id for config in assessment.payload.configurations]
    np.testing.assert_array_equal(scores.loc[ids].to_numpy(), _reference_scores(search, 4))
    choice = assessment.final_choice
    assert choice.family == "logistic" and choice.params == search.best_params_
    model = assessment.final_model
    np.testing.assert_array_equal(model.predict_proba(X), search.best_estimator_.predict_proba(X))
    # the outer folds are untouched by it: the final scores are a part of their own
    assert set(assessment.inner_scores["outer_fold"]) == {0, 1, 2}
    assert list(assessment.final_scores.columns) == ["inner_fold", "family", "config", "params", "metric",
                                                      "score", "fit_time", "score_time"]


def test_groups_reach_the_final_inner_splitter():
    X, y = load_diabetes(return_X_y=True)  # bundled open data
    groups = np.arange(len(y)) % 9
    grid = {"alpha": [0.01, 1.0, 100.0]}
    assessment = foldwise.nested_cv({"ridge": (Ridge(), grid)}, X, y, outer=GroupKFold(3), inner=GroupKFold(3),
                                    groups=groups, n_jobs=1, progress=False, final=True)
    search = GridSearchCV(Ridge(), grid, cv=GroupKFold(3)).fit(X, y, groups=groups)
    scores = assessment.final_scores.pivot(index="config", columns="inner_fold", values="score")
    ids = [config.id for config in assessment.payload.configurations]
    np.testing.assert_array_equal(scores.loc[ids].to_numpy(), _reference_scores(search, 3))
    assert assessment.final_choice.params == search.best_params_


def test_several_families_choose_by_the_rule_of_the_outer_folds(tmp_path):
    X, y = load_wine(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                          {"logisticregression__C": [0.01, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    assessment = foldwise.nested_cv(space, X, y, outer=3, inner=KFold(3, shuffle=True, random_state=1),
                                     n_jobs=1, progress=False, final=True)
    # Independent check: a plain loop over the family winners' mean inner scores picks the same one.
    means, family_of = {}, {}
    for row in assessment.final_scores.itertuples():
        means.setdefault(row.config, []).append(row.score)
        family_of[row.config] = row.family
    best = {}
    for config, scores in means.items():  # first in grid order wins ties, as GridSearchCV
        mean = sum(scores) / len(scores)
        if family_of[config] not in best or mean > best[family_of[config]][1]:
            best[family_of[config]] = (config, mean)
    overall = max(best.values(), key=lambda pair: pair[1])[0]
    assert assessment.final_choice.config == overall
    # stored and read back whole
    path = str(tmp_path / "runs.db")
    assessment.save(path)
    loaded = foldwise.load(path, assessment.uuid)
    pd.testing.assert_frame_equal(loaded.final_scores, assessment.final_scores)
    assert loaded.final_choice == assessment.final_choice
    np.testing.assert_array_equal(loaded.final_model.predict(X), assessment.final_model.predict(X))


def test_without_final_there_is_nothing_to_ship_and_it_says_so():
    X, y = load_wine(return_X_y=True)
    assessment = foldwise.nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})},
                                    X, y, outer=2, inner=2, n_jobs=1, progress=False)
    assert assessment.final_choice is None and assessment.final_scores.empty
    with pytest.raises(LookupError, match="final=True"):
        _ = assessment.final_model
