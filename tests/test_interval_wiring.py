"""The headline interval beside the nested estimate, wherever it is shown: Python, the store, the index, the API."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from alembic import command
from alembic.config import Config
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold, StratifiedKFold, cross_val_predict
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from sqlalchemy import text

import foldwise
import foldwise.store
from foldwise.stats.intervals import bbc_interval
from foldwise.store import list_assessments, make_engine

OUTER = StratifiedKFold(5, shuffle=True, random_state=3)


@pytest.fixture(scope="module")
def data():
    X, y = load_breast_cancer(return_X_y=True)  # bundled open data
    return X[::2], y[::2]


def _space():
    return {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                         {"logisticregression__C": [0.01, 1.0]}),
            "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}


@pytest.fixture(scope="module")
def repeated(data):
    X, y = data
    return foldwise.nested_cv(_space(), X, y, outer=RepeatedStratifiedKFold(n_splits=5, n_repeats=3, random_state=1),
                              inner=3, n_jobs=1, progress=False)


@pytest.fixture(scope="module")
def single(data):
    X, y = data
    return foldwise.nested_cv(_space(), X, y, outer=OUTER, inner=3, n_jobs=1, progress=False,
                              scoring=["accuracy", "roc_auc"])


def test_the_headline_is_the_corrected_t_interval_computed_by_hand(repeated):
    scores = repeated.winners["outer_score"].to_numpy()
    folds = repeated.payload.outer_folds
    j, ratio = len(scores), np.mean([len(f.test_indices) for f in folds]) / np.mean([f.n_train for f in folds])
    # Nadeau and Bengio (2003): variance × (1/J + n_test/n_train), Student t with J - 1 df (scipy.stats).
    half = stats.t.ppf(0.975, j - 1) * math.sqrt((1 / j + ratio) * np.var(scores, ddof=1))
    interval = repeated.interval()
    assert interval.method == "corrected_t" and interval.level == 0.95 and j == 15
    assert interval.low == pytest.approx(scores.mean() - half, abs=1e-12)
    assert interval.high == pytest.approx(scores.mean() + half, abs=1e-12)
    assert repeated.nested_estimate.interval == interval
    # With repeats the plain interval over folds is far narrower: it is only ever a spread.
    spread = repeated.interval(method="student_t_spread")
    expected = stats.t.interval(0.95, j - 1, loc=scores.mean(), scale=stats.sem(scores))
    assert (spread.low, spread.high) == pytest.approx(expected, abs=1e-12)
    assert spread.high - spread.low < 0.7 * (interval.high - interval.low)


def test_bbc_pools_the_predictions_cross_val_predict_makes(single, data):
    X, y = data
    configs = single.payload.configurations
    # scikit-learn's cross_val_predict on the same outer folds is the reference for one configuration's column.
    tree = DecisionTreeClassifier(random_state=0, max_depth=3)
    reference = cross_val_predict(tree, X, y, cv=OUTER, method="predict_proba")
    from foldwise.pooling import pooled_predictions

    pooled, y_true = pooled_predictions(single.payload)
    order = np.concatenate([fold.test_indices for fold in single.payload.outer_folds])
    position = next(i for i, c in enumerate(configs) if c.family == "tree" and c.params == {"max_depth": 3})
    np.testing.assert_array_equal(pooled[:, position, :], reference[order])
    np.testing.assert_array_equal(y_true.astype(int), y[order])
    found = single.interval(method="bbc", random_state=5, n_bootstrap=200)
    assert found == bbc_interval(pooled, y_true, metric="accuracy", classes=[0, 1], n_bootstrap=200, random_state=5)
    with pytest.raises(ValueError, match="method must be"):
        single.interval(method="bootstrap")


def test_the_store_the_index_and_the_migration_keep_the_same_interval(tmp_path, repeated, client):
    path = tmp_path / "runs.db"
    repeated.save(str(path))
    engine = make_engine(f"sqlite:///{path}")
    [row] = list_assessments(engine).to_dict("records")
    interval = repeated.interval()
    assert (row["estimate_low"], row["estimate_high"]) == pytest.approx((interval.low, interval.high), abs=1e-12)
    config = Config()
    config.set_main_option("script_location", str(Path(foldwise.store.__file__).parent / "migrations"))
    with engine.begin() as connection:  # the interval of an assessment stored before 0007 is filled alike
        connection.execute(text("UPDATE assessments SET estimate_low = NULL, estimate_high = NULL"))
        config.attributes["connection"] = connection
        command.downgrade(config, "0006")
        command.upgrade(config, "head")
    [refilled] = list_assessments(engine).to_dict("records")
    assert (refilled["estimate_low"], refilled["estimate_high"]) == pytest.approx((interval.low, interval.high),
                                                                                abs=1e-12)
    engine.dispose()
    client.post("/api/assessments", content=repeated.payload.model_dump_json(),
                headers={"content-type": "application/json"})
    [listed] = client.get("/api/assessments").json()
    assert listed["estimate_low"] == pytest.approx(interval.low, abs=1e-12)
    page = client.get("/").text
    assert f"95% CI</a> {interval.low:.3f} to {interval.high:.3f}" in page
    method = client.get("/methods/interval")
    assert method.status_code == 200 and "Nadeau and Bengio" in method.text
