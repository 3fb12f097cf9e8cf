"""What a space is: configurations that cannot collide, random search in a dict, search objects as they are."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import loguniform, randint
from sklearn.compose import ColumnTransformer
from sklearn.datasets import load_breast_cancer
from sklearn.decomposition import PCA
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (makes HalvingGridSearchCV importable)
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import (
    GridSearchCV,
    HalvingGridSearchCV,
    ParameterSampler,
    RandomizedSearchCV,
    StratifiedKFold,
    cross_val_score,
)
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv
from foldwise.runner.canonical import describe, identify
from foldwise.runner.space import space_from

OUTER, INNER = StratifiedKFold(3), StratifiedKFold(3)


def _winner_scores(assessment, frame="winners") -> np.ndarray:
    winners = getattr(assessment, frame).sort_values(["repeat", "outer_fold"])
    return winners["outer_score"].to_numpy()


# --- 1. configuration identity -----------------------------------------------------------------------------

def _features(columns: list[str], k: int) -> ColumnTransformer:
    """A long ColumnTransformer whose only difference lies deep inside: PCA(n_components=k) on its last part."""
    return ColumnTransformer([
        ("means", StandardScaler(), columns[:10]),
        ("errors", make_pipeline(StandardScaler(), PCA(n_components=k)), columns[10:20]),
        ("worst", StandardScaler(), columns[20:]),
    ])


def test_long_reprs_that_differ_deep_inside_are_three_configurations():
    data = load_breast_cancer(as_frame=True)
    # Longer column names (invented prefix) take the repr past scikit-learn's 700 characters.
    X, y = data.data.rename(columns=lambda name: f"baseline visit, {name}"), data.target.to_numpy()
    columns = list(X.columns)
    grid = {"features": [_features(columns, k) for k in (1, 3, 6)]}
    reprs = [repr(value) for value in grid["features"]]
    assert len(set(reprs)) == 1 and "..." in reprs[0]  # scikit-learn's repr hides the difference
    pipeline = Pipeline([("features", grid["features"][0]), ("model", LogisticRegression(max_iter=5000))])

    with warnings.catch_warnings():
        warnings.simplefilter("error")  # three distinct configurations: no duplicate warning
        assessment = nested_cv({"logistic": (pipeline, grid)}, X, y, outer=OUTER, inner=INNER, progress=False)
    ids = [config.id for config in assessment.payload.configurations]
    assert len(ids) == 3 and len(set(ids)) == 3
    assert all(" #" in ident for ident in ids)  # the cut-short label made unique by its digest

    # scikit-learn: cross_val_score of the GridSearchCV over the same three objects.
    reference = cross_val_score(GridSearchCV(pipeline, grid, cv=INNER), X, y, cv=OUTER)
    assert_allclose(_winner_scores(assessment), reference, rtol=0, atol=1e-12)


def test_equal_grid_points_are_one_configuration_and_a_warning_names_them():
    space = {"tree": (DecisionTreeClassifier(), [{"max_depth": [1, 2]}, {"max_depth": [2, 3]}])}
    with pytest.warns(UserWarning, match=r"family 'tree': 1 grid points describe a configuration already in "
                                         r"the grid and are run once: tree:\{\"max_depth\":2\}"):
        resolved = space_from(space)
    assert [c.params for c in resolved.candidates] == [{"max_depth": 1}, {"max_depth": 2}, {"max_depth": 3}]
    # Short labels stay as they were (stored assessments keep theirs): no digest where none is needed.
    assert [c.id for c in resolved.candidates] == ['tree:{"max_depth":1}', 'tree:{"max_depth":2}',
                                                   'tree:{"max_depth":3}']


def test_descriptions_tell_apart_what_reprs_do_not():
    assert describe(PCA(n_components=3)) != describe(PCA(n_components=4))
    assert describe(PCA(n_components=3)) == describe(PCA(n_components=3))
    assert describe(np.arange(2000)) != describe(np.arange(2000) + (np.arange(2000) == 1000))  # repr elides
    assert describe(np.sqrt) != describe(np.exp)
    assert describe((1, 2)) != describe([1, 2])
    assert describe(loguniform(1e-3, 1)) != describe(loguniform(1e-3, 10))


class Opaque:
    """An object that is no estimator and whose repr says nothing of its content."""

    def __init__(self, value):
        self.value = value

    def __repr__(self):
        return "Opaque()"


def test_same_labels_for_different_objects_get_a_digest():
    identified = identify("family", [{"thing": Opaque(1)}, {"thing": Opaque(2)}])
    ids = [ident for _, ident, _ in identified]
    assert len(set(ids)) == 2 and all(ident.startswith('family:{"thing":"Opaque()"} #') for ident in ids)


# --- 6. random search in a dict space ------------------------------------------------------------------------

def test_random_search_over_two_families_draws_once_and_equals_scikit_learn(cancer):
    X, y = cancer
    logistic = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    tree = DecisionTreeClassifier(random_state=0)
    laws = {"logistic": {"logisticregression__C": loguniform(1e-3, 1e2)},
            "tree": {"max_depth": randint(1, 8), "min_samples_leaf": randint(1, 30)}}
    space = {"logistic": (logistic, laws["logistic"], 4, 0), "tree": (tree, laws["tree"], 5, 1)}
    assessment = nested_cv(space, X, y, outer=OUTER, inner=INNER, progress=False)

    # The candidates are ParameterSampler's (scikit-learn) with the same seed, recorded as configurations.
    configs = assessment.payload.configurations
    for family, n_iter, seed in (("logistic", 4, 0), ("tree", 5, 1)):
        drawn = list(ParameterSampler(laws[family], n_iter, random_state=seed))
        recorded = [config.params for config in configs if config.family == family]
        assert len(recorded) == n_iter
        for point, kept in zip(drawn, recorded, strict=True):
            assert kept.keys() == point.keys()
            assert_allclose([kept[key] for key in point], [float(point[key]) for key in point], rtol=1e-15)
    assert assessment.payload.seeds["drawn candidates"] == {"logistic": {"n_iter": "4", "random_state": "0"},
                                                            "tree": {"n_iter": "5", "random_state": "1"}}

    # Each family's winners: RandomizedSearchCV (scikit-learn) draws the same candidates with the same seed.
    for family, estimator, n_iter, seed in (("logistic", logistic, 4, 0), ("tree", tree, 5, 1)):
        search = RandomizedSearchCV(estimator, laws[family], n_iter=n_iter, random_state=seed, cv=INNER)
        reference = cross_val_score(search, X, y, cv=OUTER)
        family_winners = assessment.family_winners
        mine = family_winners[family_winners["family"] == family].sort_values(["repeat", "outer_fold"])
        assert_allclose(mine["outer_score"].to_numpy(), reference, rtol=0, atol=1e-12)

    # The overall winners: GridSearchCV (scikit-learn) over the very same candidates of both families, in order.
    grid = []
    for family, estimator in (("logistic", logistic), ("tree", tree)):
        for config in (c for c in configs if c.family == family):
            grid.append({"model": [estimator], **{f"model__{key}": [value] for key, value in config.params.items()}})
    reference = cross_val_score(GridSearchCV(Pipeline([("model", tree)]), grid, cv=INNER), X, y, cv=OUTER)
    assert_allclose(_winner_scores(assessment), reference, rtol=0, atol=1e-12)


def test_a_grid_with_distributions_points_to_the_random_search_form():
    space = {"tree": (DecisionTreeClassifier(), {"max_depth": randint(1, 8)})}
    with pytest.raises(TypeError, match=r"space\['tree'\] gives distributions for \['max_depth'\]: a grid takes "
                                        r"lists of values; for random search give \(estimator, distributions, "
                                        r"n_iter, random_state\)"):
        space_from(space)
    with pytest.raises(TypeError, match=r"n_iter \(the third item\) must be a positive int"):
        space_from({"tree": (DecisionTreeClassifier(), {"max_depth": randint(1, 8)}, 0)})


# --- 5. search objects as they are ---------------------------------------------------------------------------

def _searches():
    tree, grid = DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3, 4]}
    return [GridSearchCV(tree, grid, cv=3, scoring="roc_auc"),
            RandomizedSearchCV(tree, grid, n_iter=3, random_state=0, cv=3, scoring="roc_auc"),
            HalvingGridSearchCV(tree, grid, cv=3, factor=2, random_state=0, scoring="roc_auc")]


@pytest.mark.parametrize("search", _searches(), ids=lambda search: type(search).__name__)
def test_a_conflicting_inner_or_scoring_beside_a_search_is_refused_alike(cancer, search):
    X, y = cancer
    kind = type(search).__name__
    with pytest.raises(ValueError, match=rf"{kind}\(cv=3\) is the inner splitter and wins over inner=5; leave "
                                         rf"inner= out, or set the search's own: search.set_params\(cv=5\)"):
        nested_cv(search, X, y, outer=3, inner=5, progress=False)
    with pytest.raises(ValueError, match=rf"{kind}\(scoring='roc_auc', refit=True\) selects by 'roc_auc' and wins "
                                         rf"over scoring='accuracy', which names 'accuracy' first; leave scoring= "
                                         rf"out, put 'roc_auc' first"):
        nested_cv(search, X, y, outer=3, scoring="accuracy", progress=False)


@pytest.mark.parametrize("search", _searches(), ids=lambda search: type(search).__name__)
def test_a_search_runs_with_its_own_settings_and_equals_scikit_learn(cancer, search):
    X, y = cancer
    # An equal inner and a scoring that selects alike and records one more metric are accepted.
    assessment = nested_cv(search, X, y, outer=OUTER, inner=3, scoring=["roc_auc", "accuracy"], progress=False)
    design = assessment.payload.design
    assert design.n_inner_folds == 3 and design.metrics == ["roc_auc", "accuracy"]
    assert [family.name for family in assessment.payload.families] == ["DecisionTreeClassifier"]
    # scikit-learn: cross_val_score of the very same search.
    reference = cross_val_score(search, X, y, cv=OUTER, scoring="roc_auc")
    assert_allclose(_winner_scores(assessment), reference, rtol=0, atol=1e-12)


def test_families_from_search_objects_have_readable_names(cancer):
    X, y = cancer
    pipeline = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    search = GridSearchCV(pipeline, {"logisticregression__C": [0.1, 1.0]}, cv=3)
    assessment = nested_cv(search, X, y, outer=3, progress=False)
    assert [family.name for family in assessment.payload.families] == ["LogisticRegression"]
    named = nested_cv({"scaled logistic": search}, X, y, outer=3, progress=False)
    assert [family.name for family in named.payload.families] == ["scaled logistic"]
    assert named.payload.design.n_inner_folds == 3
    with pytest.raises(TypeError, match=r"space entries \['scaled logistic'\] are search objects beside other "
                                        r"families"):
        nested_cv({"scaled logistic": search, "tree": (DecisionTreeClassifier(), {})}, X, y, progress=False)


def test_a_search_without_scoring_selects_by_the_default_and_takes_a_list_led_by_it(cancer):
    X, y = cancer
    search = GridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]}, cv=3)
    assessment = nested_cv(search, X, y, outer=3, scoring=["accuracy", "roc_auc"], progress=False)
    assert assessment.payload.design.metrics == ["accuracy", "roc_auc"]
