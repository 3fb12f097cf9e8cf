"""A pipeline's leading steps fitted once per fold for the configurations that share them.

Checked against separate fits (``share_prefixes=False``, where every configuration fits its whole
pipeline) bit for bit, and against scikit-learn's ``GridSearchCV`` inside ``cross_val_score`` (the
reference library); the counted steps show what was shared.
"""

from __future__ import annotations

import base64

import counted_fits
import numpy as np
import pytest
import skops.io
from counted_fits import CountedPCA, CountedScaler
from numpy.testing import assert_array_equal
from pandas.testing import assert_frame_equal
from sklearn.ensemble import RandomForestClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline

from foldwise import nested_cv
from foldwise.runner.growth import growth_chains
from foldwise.runner.prefix import prefix_groups, shared_steps
from foldwise.runner.space import space_from

OUTER, INNER = 3, 3
FOLDS = OUTER * (INNER + 1)  # inner folds and outer training sets: the fits of one configuration


def _pipeline(final, *, pca_seed=0) -> Pipeline:
    return Pipeline([("scale", CountedScaler()), ("pca", CountedPCA(svd_solver="randomized", random_state=pca_seed)),
                     ("model", final)])


def _run(space, X, y, **options):
    return nested_cv(space, X, y, outer=OUTER, inner=INNER, scoring="roc_auc", progress=False, n_jobs=1, **options)


def _counted(tmp_path, monkeypatch, run):
    log = tmp_path / f"fits-{len(list(tmp_path.iterdir()))}.log"
    monkeypatch.setenv(counted_fits.LOG, str(log))
    result = run()
    monkeypatch.delenv(counted_fits.LOG)
    return result, {step: counted_fits.count(log, step) for step in ("scaler", "pca")}


def assert_same_fits(mine, separate) -> None:
    for name in ("inner_scores", "outer_scores"):
        left, right = getattr(mine, name), getattr(separate, name)
        assert len(left) > 0
        assert_frame_equal(left.drop(columns=["fit_time", "score_time"]),
                           right.drop(columns=["fit_time", "score_time"]), check_exact=True)
    assert [(p.config, p.kind, p.data) for p in mine.payload.predictions] == \
        [(p.config, p.kind, p.data) for p in separate.payload.predictions]
    assert [(f.config, f.level, f.message) for f in mine.payload.failures] == \
        [(f.config, f.level, f.message) for f in separate.payload.failures]


@pytest.fixture
def space():
    grid = {"pca__n_components": [5, 10], "model__C": [0.01, 0.1, 1.0]}
    return {"logistic": (_pipeline(LogisticRegression(max_iter=5000)), grid)}


def test_shared_steps_give_the_separate_fits_and_gridsearchcv(space, cancer, tmp_path, monkeypatch,
                                                              matches_grid_search):
    X, y = cancer
    shared, fitted = _counted(tmp_path, monkeypatch, lambda: _run(space, X, y))
    separate, fitted_separately = _counted(tmp_path, monkeypatch, lambda: _run(space, X, y, share_prefixes=False))
    assert_same_fits(shared, separate)
    matches_grid_search(shared, space, X, y, outer=OUTER, inner=INNER, scoring="roc_auc")
    # The scaler once per fold, the PCA once per fold and number of components; apart, once per fit.
    assert fitted == {"scaler": FOLDS, "pca": FOLDS * 2}
    assert fitted_separately == {"scaler": FOLDS * 6, "pca": FOLDS * 6}


def test_a_step_drawing_afresh_is_not_shared(cancer, tmp_path, monkeypatch):
    X, y = cancer
    # PCA's full solver is exact whatever its seed, so the two runs can be compared; the rule still
    # treats random_state=None as drawing afresh and fits it, and the steps after it, per configuration.
    space = {"logistic": (Pipeline([("scale", CountedScaler()), ("pca", CountedPCA(svd_solver="full")),
                                    ("model", LogisticRegression(max_iter=5000))]),
                          {"pca__n_components": [5, 10], "model__C": [0.1, 1.0]})}
    shared, fitted = _counted(tmp_path, monkeypatch, lambda: _run(space, X, y))
    assert fitted == {"scaler": FOLDS, "pca": FOLDS * 4}  # the deterministic scaler is still shared
    assert_same_fits(shared, _run(space, X, y, share_prefixes=False))


def test_growing_trees_on_shared_steps(cancer, tmp_path, monkeypatch, matches_grid_search):
    X, y = cancer
    space = {"forest": (_pipeline(RandomForestClassifier(random_state=0)),
                        {"model__n_estimators": [5, 15], "model__max_depth": [2, 4]})}
    shared, fitted = _counted(tmp_path, monkeypatch, lambda: _run(space, X, y))
    assert fitted == {"scaler": FOLDS, "pca": FOLDS}
    assert_same_fits(shared, _run(space, X, y, share_prefixes=False, grow=False))
    matches_grid_search(shared, space, X, y, outer=OUTER, inner=INNER, scoring="roc_auc")
    # The larger forest grew from the smaller, on the shared steps: its time counts both, once each.
    outer = shared.outer_scores
    assert (outer["fit_time"] > 0).all()


def test_kept_models_are_whole_pipelines_that_predict_as_recorded(space, cancer):
    X, y = cancer
    # The counted steps are classes of a test module: the loader reads them back only when the run trusts it.
    assessment = _run(space, X, y, keep_models=True, trusted=[counted_fits.__name__.split(".")[0]])
    folds = {(fold.repeat, fold.outer_fold): fold for fold in assessment.payload.outer_folds}
    predictions = {(p.repeat, p.outer_fold, p.config): p.array() for p in assessment.payload.predictions}
    assert len(assessment.payload.models) == OUTER
    for kept in assessment.payload.models:
        data = base64.b64decode(kept.skops)
        model = skops.io.loads(data, trusted=skops.io.get_untrusted_types(data=data))
        assert [name for name, _ in model.steps] == ["scale", "pca", "model"]
        rows = folds[(kept.repeat, kept.outer_fold)].test_indices
        assert_array_equal(model.predict_proba(X[rows]), predictions[(kept.repeat, kept.outer_fold, kept.config)])


def test_a_failing_shared_step_fails_each_configuration_as_its_own_fit_would(cancer):
    X, y = cancer
    # 40 components of 30 features: PCA refuses, for those configurations only.
    space = {"logistic": (_pipeline(LogisticRegression(max_iter=5000)),
                          {"pca__n_components": [5, 40], "model__C": [0.1, 1.0]})}
    with pytest.warns(RuntimeWarning, match="fits failed"):
        shared = _run(space, X, y)
    with pytest.warns(RuntimeWarning, match="fits failed"):
        separate = _run(space, X, y, share_prefixes=False)
    assert_same_fits(shared, separate)
    assert len(shared.payload.failures) == FOLDS * 2
    scores = np.concatenate([shared.inner_scores["score"], shared.outer_scores["score"]])
    assert np.isnan(scores).sum() == FOLDS * 2  # the other configurations scored


def test_a_large_group_is_cut_into_jobs_of_eight_keeping_shared_steps_and_chains_together():
    grid = {"pca__n_components": [3, 5], "model__C": [0.01 * 2 ** i for i in range(10)]}
    space = space_from({"logistic": (_pipeline(LogisticRegression()), grid)})
    keys = shared_steps(space)
    jobs = prefix_groups(space, keys, {c: c for c in range(len(space.candidates))})
    assert sorted(c for job in jobs for c in job) == list(range(20))
    assert [len(job) for job in jobs] == [8, 8, 4]
    components = [[space.candidates[c].params["pca__n_components"] for c in job] for job in jobs]
    assert components == [[3] * 8, [3, 3] + [5] * 6, [5] * 4]  # the grid's PCA settings, one after the other

    forests = space_from({"forest": (_pipeline(RandomForestClassifier(random_state=0)),
                                     {"model__n_estimators": list(range(1, 11)), "model__max_depth": [2, 3]})})
    chains = growth_chains(forests, n_samples=100)
    chain_of = {c: n for n, chain in enumerate(chains) for c in chain}
    jobs = prefix_groups(forests, shared_steps(forests), chain_of)
    assert sorted(sorted(job) for job in jobs) == sorted(sorted(chain) for chain in chains)  # ten trees each: uncut
