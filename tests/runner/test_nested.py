"""nested_cv against scikit-learn's own nested cross-validation: GridSearchCV inside cross_val_score."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import randint
from sklearn.linear_model import Ridge
from sklearn.model_selection import (
    GridSearchCV,
    KFold,
    ParameterSampler,
    RandomizedSearchCV,
    StratifiedKFold,
    cross_val_score,
    cross_validate,
)
from sklearn.neighbors import KNeighborsRegressor
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv
from foldwise.payload import AssessmentPayload


def _winner_scores(assessment, metric=None):
    """The overall winners' outer scores of one metric, in (repeat, outer fold) order."""
    outer = assessment.outer_scores
    rows = outer[outer["overall_winner"] & (outer["metric"] == (metric or assessment.selection_metric))]
    return rows.sort_values(["repeat", "outer_fold"])["score"].to_numpy()


def test_classifier_families_match_grid_search_in_cross_val_score(cancer, classifier_space, matches_grid_search):
    X, y = cancer
    assessment = nested_cv(classifier_space, X, y, outer=3, inner=3, scoring="roc_auc", progress=False, n_jobs=1)

    matches_grid_search(assessment, classifier_space, X, y, outer=3, inner=3, scoring="roc_auc")

    # The overall winner of a fold is the family winner with the best mean inner score, which is
    # each family's GridSearchCV.best_score_ (scikit-learn); ties would go to the first family.
    for fold, (train, _) in enumerate(StratifiedKFold(3).split(X, y)):
        best = {family: GridSearchCV(estimator, grid, cv=3, scoring="roc_auc").fit(X[train], y[train]).best_score_
                for family, (estimator, grid) in classifier_space.items()}
        assert assessment.winners["family"].iloc[fold] == max(best, key=best.get)
        assert_allclose(assessment.winners["inner_mean"].iloc[fold], max(best.values()), rtol=0, atol=1e-12)
    assert assessment.nested_estimate.mean == pytest.approx(float(np.mean(_winner_scores(assessment))), abs=1e-15)
    AssessmentPayload.model_validate_json(assessment.payload.model_dump_json())


def test_regressor_families_match_grid_search_in_cross_val_score(diabetes, matches_grid_search):
    X, y = diabetes
    space = {"ridge": (Ridge(), {"alpha": [0.01, 0.1, 1.0]}),
             "knn": (KNeighborsRegressor(), {"n_neighbors": [5, 15, 30]})}
    outer = KFold(4, shuffle=True, random_state=0)
    scoring = ["neg_mean_squared_error", "r2"]
    assessment = nested_cv(space, X, y, outer=outer, inner=3, scoring=scoring, progress=False)

    matches_grid_search(assessment, space, X, y, outer=outer, inner=3, scoring="neg_mean_squared_error")
    # The second metric scores the same refit winners: cross_validate with two scorers (scikit-learn).
    outer_scores = assessment.outer_scores
    for family, (estimator, grid) in space.items():
        search = GridSearchCV(estimator, grid, cv=3, scoring="neg_mean_squared_error")
        reference = cross_validate(search, X, y, cv=outer, scoring=scoring)["test_r2"]
        rows = outer_scores[(outer_scores["family"] == family) & outer_scores["family_winner"]
                            & (outer_scores["metric"] == "r2")]
        assert_allclose(rows.sort_values("outer_fold")["score"].to_numpy(), reference, rtol=0, atol=1e-12)
    assert assessment.payload.design.task == "regression"
    assert assessment.payload.design.classes is None


def test_grid_search_as_space_matches_cross_val_score(cancer):
    X, y = cancer
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3, 4]}, cv=3,
                          scoring="roc_auc")
    assessment = nested_cv(search, X, y, outer=3, progress=False)

    # scikit-learn's nested estimate of the very same search object.
    reference = cross_val_score(search, X, y, cv=3, scoring="roc_auc")
    assert_allclose(_winner_scores(assessment), reference, rtol=0, atol=1e-12)
    assert assessment.payload.design.metrics == ["roc_auc"]
    assert assessment.payload.design.n_inner_folds == 3


def test_grid_search_scoring_several_metrics_selects_by_its_refit_metric(cancer):
    X, y = cancer
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3, 4, 6]}, cv=3,
                          scoring=["roc_auc", "accuracy"], refit="accuracy")
    assessment = nested_cv(search, X, y, outer=3, progress=False)

    # GridSearchCV refits the best configuration by its `refit` metric (scikit-learn).
    reference = cross_validate(search, X, y, cv=3, scoring=["accuracy", "roc_auc"])
    assert assessment.selection_metric == "accuracy"
    assert_allclose(_winner_scores(assessment), reference["test_accuracy"], rtol=0, atol=1e-12)
    assert_allclose(_winner_scores(assessment, "roc_auc"), reference["test_roc_auc"], rtol=0, atol=1e-12)


def test_randomized_search_as_space_matches_cross_val_score(cancer):
    X, y = cancer
    search = RandomizedSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": randint(1, 9)}, n_iter=4,
                                cv=3, scoring="roc_auc", random_state=0)
    assessment = nested_cv(search, X, y, outer=3, progress=False)

    reference = cross_val_score(search, X, y, cv=3, scoring="roc_auc")  # scikit-learn
    assert_allclose(_winner_scores(assessment), reference, rtol=0, atol=1e-12)
    # The candidates are the ones RandomizedSearchCV draws with that seed (scikit-learn's ParameterSampler).
    drawn = {point["max_depth"] for point in ParameterSampler({"max_depth": randint(1, 9)}, 4, random_state=0)}
    assert {config.params["max_depth"] for config in assessment.payload.configurations} == drawn


def test_randomized_search_seeded_by_a_random_state_object_leaves_it_untouched(cancer):
    X, y = cancer
    generator = np.random.RandomState(7)
    search = RandomizedSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": randint(1, 30)}, n_iter=3,
                                cv=3, scoring="roc_auc", random_state=generator)
    before = generator.get_state()[1].copy()
    first = nested_cv(search, X, y, outer=3, progress=False)
    second = nested_cv(search, X, y, outer=3, progress=False)

    assert np.array_equal(generator.get_state()[1], before)
    assert [c.id for c in first.payload.configurations] == [c.id for c in second.payload.configurations]
    # cross_val_score clones the search, which copies the generator for every outer fold (scikit-learn).
    reference = cross_val_score(search, X, y, cv=3, scoring="roc_auc")
    assert_allclose(_winner_scores(first), reference, rtol=0, atol=1e-12)


def test_mismatched_lengths_are_refused(cancer, classifier_space):
    X, y = cancer
    with pytest.raises(ValueError, match=r"X, y and groups must have the same number of rows, got 569, 568 and None"):
        nested_cv(classifier_space, X, y[:-1], progress=False)
    with pytest.raises(ValueError, match=r"got 569, 569 and 10"):
        nested_cv(classifier_space, X, y, groups=np.arange(10), progress=False)


def test_sparse_features_are_accepted(cancer):
    from scipy.sparse import csr_matrix

    X, y = cancer
    space = {"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}
    dense = nested_cv(space, X, y, outer=3, inner=3, progress=False)
    sparse = nested_cv(space, csr_matrix(X), y, outer=3, inner=3, progress=False)
    assert sparse.payload.design.n_features == 30
    assert_allclose(sparse.inner_scores["score"], dense.inner_scores["score"], rtol=0, atol=1e-12)


def test_unknown_scorer_name_is_refused(cancer, classifier_space):
    X, y = cancer
    with pytest.raises(ValueError, match=r"unknown scorer names \['roc_area'\]; see sklearn.metrics.get_scorer_names"):
        nested_cv(classifier_space, X, y, scoring="roc_area", progress=False)
    with pytest.raises(TypeError, match=r"scoring must be a scorer name, a list of names, a dict \{name: scorer\}, "
                                        r"a scorer object \(make_scorer\(...\)\) or a callable .*; got 3"):
        nested_cv(classifier_space, X, y, scoring=3, progress=False)


def test_space_that_is_not_a_dict_is_refused(cancer, classifier_space):
    X, y = cancer
    with pytest.raises(TypeError, match=r"space must be a non-empty dict \{family: \(estimator, param_grid\)\} "
                                        r"or a GridSearchCV / RandomizedSearchCV, got list"):
        nested_cv(list(classifier_space.values()), X, y, progress=False)
    with pytest.raises(TypeError, match=r"space\['tree'\] must be \(estimator, param_grid\), \(estimator, "
                                        r"distributions, n_iter\[, random_state\]\) or a GridSearchCV / "
                                        r"RandomizedSearchCV, got DecisionTree"):
        nested_cv({"tree": DecisionTreeClassifier()}, X, y, progress=False)


def test_families_mixing_classifiers_and_regressors_are_refused(cancer):
    X, y = cancer
    space = {"tree": (DecisionTreeClassifier(), {}), "ridge": (Ridge(), {})}
    with pytest.raises(ValueError, match=r"families mix classifiers \['tree'\] and regressors \['ridge'\]; "
                                         r"one assessment holds one task"):
        nested_cv(space, X, y, progress=False)
