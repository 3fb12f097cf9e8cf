"""keep_models keeps only what the store's loader reads back, says which it left out, and trusts libraries when told."""

from __future__ import annotations

import base64

import numpy as np
import pytest
import skops.io
from sklearn.base import BaseEstimator, ClassifierMixin, TransformerMixin
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise import nested_cv
from foldwise.ensemble import UntrustedTypes, load_skops


class HandMadeScaler(TransformerMixin, BaseEstimator):
    """A step of a class no library ships: the loader does not trust it inside a pipeline."""

    def fit(self, X, y=None):
        self.scale_ = np.asarray(X).std(axis=0) + 1e-12
        return self

    def transform(self, X):
        return np.asarray(X) / self.scale_


class Booster:
    """A fitted model's own plain class, as a boosting library keeps one inside its estimator."""

    def __init__(self, threshold):
        self.threshold = threshold


class BoostedStump(ClassifierMixin, BaseEstimator):
    """Unfitted it holds nothing the loader refuses; fitted it holds a Booster."""

    def __init__(self, feature=0):
        self.feature = feature

    def fit(self, X, y):
        X = np.asarray(X)
        self.classes_ = np.unique(y)
        self.booster_ = Booster(float(np.median(X[:, self.feature])))
        return self

    def predict(self, X):
        return self.classes_[(np.asarray(X)[:, self.feature] > self.booster_.threshold).astype(int)]


def _library(kind: type) -> str:
    return kind.__module__.split(".")[0]


def test_a_family_the_loader_refuses_is_said_at_the_start_and_not_kept(cancer):
    X, y = cancer
    space = {"hand made": (Pipeline([("scale", HandMadeScaler()), ("tree", DecisionTreeClassifier(random_state=0))]),
                           {"tree__max_depth": [1, 2]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}
    with pytest.warns(RuntimeWarning, match=r"keep_models: the store's loader cannot read back the estimators of 1 "
                                            r"family \('hand made': holds \[.*HandMadeScaler'\], which the loader "
                                            r"does not trust\), so their fold winners are not kept \(build_ensemble "
                                            r"refits such members"):
        assessment = nested_cv(space, X, y, outer=3, inner=2, progress=False, keep_models=True)
    configs = assessment.payload.configurations
    kept = {configs[model.config].family for model in assessment.payload.models}
    assert kept == {"tree"} and len(assessment.payload.models) == 3  # one tree winner per outer fold
    assert assessment.nested_estimate.n_used == 3  # the run itself is whole


def test_fitted_models_holding_untrusted_types_are_left_out_unless_their_library_is_trusted(cancer, tmp_path):
    X, y = cancer
    space = {"stump": (BoostedStump(), {"feature": [0, 1]})}
    with pytest.warns(RuntimeWarning, match=r"keep_models: 3 fitted fold winners hold types the store's loader does "
                                            r"not trust: 3 of family 'stump' \(holding \[.*Booster'\]\)"):
        untrusted = nested_cv(space, X, y, outer=3, inner=2, progress=False, keep_models=True)
    assert untrusted.payload.models == [] and untrusted.payload.design.trusted == []

    library = _library(Booster)
    trusted = nested_cv(space, X, y, outer=3, inner=2, progress=False, keep_models=True, trusted=[library])
    assert trusted.payload.design.trusted == [library] and len(trusted.payload.models) == 3
    families = [family.estimator_class for family in trusted.payload.families]
    model = trusted.payload.models[0]
    data = base64.b64decode(model.skops)
    # The loader reads it back only with the library the run named; skops itself says which types it holds.
    assert any(name.endswith(".Booster") for name in skops.io.get_untrusted_types(data=data))
    with pytest.raises(UntrustedTypes, match="Booster"):
        load_skops(data, allowed=families)
    assert isinstance(load_skops(data, allowed=families, libraries=trusted.payload.design.trusted), BoostedStump)

    # The trust is kept with the assessment in the store.
    store = tmp_path / "store.db"
    trusted.save(str(store))
    assert foldwise.load(str(store), trusted.uuid).payload.design.trusted == [library]


def test_trusted_names_libraries_by_their_module(cancer):
    X, y = cancer
    with pytest.raises(TypeError, match=r"trusted must name libraries by their top-level module \(e.g. "
                                        r"\['xgboost'\]\), got \['xgboost.core'\]"):
        nested_cv({"tree": (DecisionTreeClassifier(), {})}, X, y, progress=False, trusted=["xgboost.core"])


def test_scikit_learn_models_are_kept_without_any_warning(cancer):
    X, y = cancer
    space = {"scaled tree": (Pipeline([("scale", StandardScaler()), ("tree", DecisionTreeClassifier(random_state=0))]),
                             {"tree__max_depth": [1, 2]})}
    assessment = nested_cv(space, X, y, outer=2, inner=2, progress=False, keep_models=True)  # warnings fail the suite
    assert len(assessment.payload.models) == 2


def test_the_trust_is_content_and_its_absence_keeps_the_digest_documents_had(cancer):
    from foldwise.identity import content_digest
    from foldwise.payload import AssessmentPayload

    X, y = cancer
    payload = nested_cv({"tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2]})}, X, y, outer=2,
                        inner=2, progress=False).payload
    document = payload.model_dump(mode="json")
    without = {**document, "design": {k: v for k, v in document["design"].items() if k != "trusted"}}
    trusting = {**document, "design": {**document["design"], "trusted": ["xgboost"]}}
    digests = [content_digest(AssessmentPayload.model_validate(doc)) for doc in (document, without, trusting)]
    assert digests[0] == digests[1] != digests[2]
