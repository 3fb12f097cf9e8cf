"""Exporting a saved ensemble: the JSON specification, build_ensemble, the prefit model file, the skops guard.

Reference: scikit-learn's VotingClassifier built and fitted by the test itself, and the fold winners
refit by the test on its own pass over the same outer splitter; data: scikit-learn's bundled breast
cancer set. Real stores under tmp_path, a real app through TestClient.
"""

from __future__ import annotations

import builtins
import importlib
import io
import json
import sqlite3

import numpy as np
import pytest
import skops.io
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.datasets import load_breast_cancer
from sklearn.decomposition import PCA
from sklearn.ensemble import VotingClassifier
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (makes the next import work)
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import HalvingGridSearchCV, StratifiedKFold
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import FunctionTransformer, StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.client import save
from foldwise.ensemble import UntrustedTypes, load_skops
from foldwise.store import db_url_from, insert_ensemble, make_engine

OUTER = StratifiedKFold(n_splits=3, shuffle=True, random_state=0)
SPACE = {
    "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                 {"logisticregression__C": [0.05, 1.0]}),
    "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 4]}),
}


class Sneaky(ClassifierMixin, BaseEstimator):
    """A class no store should be able to make this machine build."""


class Streaming(ClassifierMixin, BaseEstimator):
    """Once fitted it holds an open text stream, which skops (like pickle) cannot write."""

    def fit(self, X, y):
        self.classes_, self.log_ = np.unique(y), io.StringIO()
        return self

    def predict(self, X):
        return np.full(len(X), self.classes_[0])


@pytest.fixture(scope="module")
def data():
    X, y = load_breast_cancer(return_X_y=True)
    return X[::2], y[::2]


@pytest.fixture(scope="module")
def run(data):
    X, y = data
    return foldwise.nested_cv(SPACE, X, y, outer=OUTER, inner=3, scoring=["roc_auc", "accuracy"], n_jobs=1,
                              progress=False, name="kept models", keep_models=True)


def stored_ensemble(tmp_path, run, members=None):
    """The run saved into a fresh store file, with one saved ensemble of its family winners."""
    path = tmp_path / "store.db"
    save(run.payload, str(path))
    members = members or sorted(set(run.family_winners["config"]))
    engine = make_engine(db_url_from(str(path)))
    ensemble = insert_ensemble(engine, run.uuid, name="family winners", note="", members=members,
                               voting="soft", metric="roc_auc", estimate_mean=None, estimate_sd=None)
    engine.dispose()
    return path, ensemble


def reference(members, configs, X, y):
    """A VotingClassifier built here from the members' own estimators and parameters."""
    named = [(f"m{i}", clone(SPACE[configs[m].family][0]).set_params(**configs[m].params))
             for i, m in enumerate(members)]
    return VotingClassifier(named, voting="soft").fit(X, y)


def test_keep_models_keeps_exactly_the_family_winners_of_each_outer_fold(run):
    kept = {(m.repeat, m.outer_fold, run.payload.configurations[m.config].id) for m in run.payload.models}
    winners = set(run.family_winners[["repeat", "outer_fold", "config"]].itertuples(index=False, name=None))
    assert kept == winners
    assert all(f.estimator_skops for f in run.payload.families)


def test_build_ensemble_from_a_store_predicts_as_a_voting_classifier_built_here(tmp_path, run, data):
    X, y = data
    path, ensemble = stored_ensemble(tmp_path, run)
    built = foldwise.build_ensemble(ensemble.id, X, y, store=str(path))
    assert isinstance(built, VotingClassifier) and built.voting == "soft"
    configs = {c.id: c for c in run.payload.configurations}
    expected = reference(ensemble.members, configs, X, y)
    np.testing.assert_allclose(built.predict_proba(X), expected.predict_proba(X), rtol=0, atol=1e-12)
    assert np.array_equal(built.predict(X), expected.predict(X))


def test_the_spec_reads_without_foldwise_and_rebuilds_with_your_own_space(tmp_path, run, data, open_client):
    X, y = data
    path, ensemble = stored_ensemble(tmp_path, run)
    with open_client(f"sqlite:///{path}") as client:
        spec_file = tmp_path / "spec.json"
        spec_file.write_bytes(client.get(f"/api/ensembles/{ensemble.id}/spec").content)
    spec = json.loads(spec_file.read_text())  # plain JSON
    assert [m["config"] for m in spec["members"]] == ensemble.members
    # A member made from the spec with scikit-learn alone: its class from the import path, its settings
    # from the repr (evaluated with only that class in scope) and its parameters.
    tree = next(m for m in spec["members"] if m["family"] == "tree")
    module, _, name = tree["estimator_class"].rpartition(".")
    cls = getattr(importlib.import_module(module), name)
    by_hand = eval(tree["estimator"], {name: cls}).set_params(**tree["params"]).fit(X, y)  # noqa: S307
    built = foldwise.build_ensemble(spec_file, X, y, space=SPACE)
    np.testing.assert_array_equal(built.named_estimators_[tree["name"]].predict_proba(X),
                                  by_hand.predict_proba(X))
    configs = {c.id: c for c in run.payload.configurations}
    expected = reference(ensemble.members, configs, X, y).predict_proba(X)
    np.testing.assert_allclose(built.predict_proba(X), expected, rtol=0, atol=1e-12)


def test_the_model_file_is_the_kept_fold_winners_averaged(tmp_path, run, data, open_client):
    X, y = data
    path, ensemble = stored_ensemble(tmp_path, run)
    with open_client(f"sqlite:///{path}") as client:
        response = client.get(f"/api/ensembles/{ensemble.id}/model")
        assert client.get(f"/api/ensembles/{ensemble.id}").json()["models_kept"] is True
    assert response.status_code == 200 and "attachment" in response.headers["content-disposition"]
    model = load_skops(response.content)
    # Each member's fold winners, refit here on the training rows of the folds in which it won its family,
    # each member weighing the same however many folds it won.
    configs = {c.id: c for c in run.payload.configurations}
    splits = list(OUTER.split(X, y))
    probas, weights = [], []
    for member in ensemble.members:
        folds = run.family_winners[run.family_winners["config"] == member]["outer_fold"].tolist()
        for fold in folds:
            train = splits[fold][0]
            fitted = clone(SPACE[configs[member].family][0]).set_params(**configs[member].params)
            fitted.fit(X[train], y[train])
            probas.append(fitted.predict_proba(X))
            weights.append(1 / len(folds))
    expected = np.average(np.asarray(probas), axis=0, weights=weights)
    np.testing.assert_allclose(model.predict_proba(X), expected, rtol=0, atol=1e-9)
    assert np.array_equal(model.predict(X), np.argmax(expected, axis=1))
    # Plain skops reads it too, once told which types to trust.
    plain = skops.io.loads(response.content, trusted=skops.io.get_untrusted_types(data=response.content))
    np.testing.assert_array_equal(plain.predict(X), model.predict(X))


def test_a_skops_file_with_an_unexpected_type_is_refused_naming_it():
    with pytest.raises(UntrustedTypes, match=r"refused to load the skops file: it holds \['.*Sneaky'\]"):
        load_skops(skops.io.dumps(Sneaky()))
    name = f"{Sneaky.__module__}.{Sneaky.__qualname__}"
    assert isinstance(load_skops(skops.io.dumps(Sneaky()), allowed=[name]), Sneaky)
    # A function is never trusted, even from builtins or a trusted package.
    for func, named in ((builtins.eval, "builtins.eval"), (np.load, "numpy.load")):
        with pytest.raises(UntrustedTypes, match=rf"\['{named}'\].*skops.io.loads"):
            load_skops(skops.io.dumps(FunctionTransformer(func)))
    assert isinstance(load_skops(skops.io.dumps(FunctionTransformer(np.log1p))), FunctionTransformer)


def test_a_tampered_store_cannot_make_build_ensemble_load_a_foreign_type(tmp_path, run, data):
    X, y = data
    path, ensemble = stored_ensemble(tmp_path, run)
    raw = sqlite3.connect(path)
    raw.execute("UPDATE families SET estimator_skops = ?", (skops.io.dumps(Sneaky()),))
    raw.commit()
    raw.close()
    refused = r"family '(logistic|tree)''s estimator: it holds \['.*Sneaky'\]"
    with pytest.raises(UntrustedTypes, match=refused):
        foldwise.build_ensemble(ensemble.id, X, y, store=str(path))


def test_a_parameter_kept_only_as_a_repr_sends_you_to_your_own_space(tmp_path, data, open_client):
    X, y = data
    steps = [("scale", StandardScaler()), ("reduce", PCA()), ("model", LogisticRegression())]
    space = {"reduced": (Pipeline(steps),
                         {"reduce": [PCA(n_components=2), "passthrough"]})}
    run = foldwise.nested_cv(space, X, y, outer=2, inner=2, n_jobs=1, progress=False)
    member = next(c.id for c in run.payload.configurations if "PCA" in c.id)
    path, ensemble = stored_ensemble(tmp_path, run, members=[member])
    kept_as_text = r"parameter 'reduce' was kept only as the text 'PCA\(n_components=2\)'"
    with pytest.raises(ValueError, match=kept_as_text):
        foldwise.build_ensemble(ensemble.id, X, y, store=str(path))
    with open_client(f"sqlite:///{path}") as client:
        spec = client.get(f"/api/ensembles/{ensemble.id}/spec").json()
    built = foldwise.build_ensemble(spec, X, y, space=space)
    assert built.estimators_[0].named_steps["reduce"].n_components_ == 2


def test_build_ensemble_refuses_unclear_calls(tmp_path, run, data, open_client):
    X, y = data
    path, ensemble = stored_ensemble(tmp_path, run)
    with pytest.raises(TypeError, match="either store=.*not neither"):
        foldwise.build_ensemble(ensemble.id, X, y)
    with pytest.raises(TypeError, match="not both"):
        foldwise.build_ensemble(ensemble.id, X, y, store=str(path), space=SPACE)
    with pytest.raises(FileNotFoundError, match="no store at"):
        foldwise.build_ensemble(ensemble.id, X, y, store=str(tmp_path / "elsewhere.db"))
    with pytest.raises(LookupError, match="no ensemble 'abc'"):
        foldwise.build_ensemble("abc", X, y, store=str(path))
    with pytest.raises(ValueError, match="expected an ensemble specification"):
        foldwise.build_ensemble({"members": []}, X, y, space=SPACE)
    with open_client(f"sqlite:///{path}") as client:
        spec = client.get(f"/api/ensembles/{ensemble.id}/spec").json()
    with pytest.raises(ValueError, match=r"are not configurations of the space given.*\['tree'\]"):
        foldwise.build_ensemble(spec, X, y, space={"tree": SPACE["tree"]})


def test_keep_models_needs_a_space_foldwise_expands(data):
    X, y = data
    search = HalvingGridSearchCV(DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]}, cv=2)
    with pytest.raises(ValueError, match="keep_models=True needs a space foldwise expands"):
        foldwise.nested_cv(search, X, y, outer=2, progress=False, keep_models=True)


def test_a_fitted_model_that_skops_cannot_write_is_left_out_with_a_warning(data):
    X, y = data
    with pytest.warns(RuntimeWarning, match="skops could not write a fitted fold winner"):
        run = foldwise.nested_cv({"stream": (Streaming(), {})}, X, y, outer=2, inner=2, n_jobs=1,
                                 progress=False, keep_models=True)
    assert run.payload.models == []
    assert run.payload.families[0].estimator_skops is not None  # unfitted, it holds no stream yet
