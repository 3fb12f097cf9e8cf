"""Payloads built by hand for the store tests, and a fresh store per test on each backend: a real SQLite
file, and a new database on a real PostgreSQL server (``FOLDWISE_TEST_PG_URL``; ``make test`` starts one).

The scores are invented (seeded random numbers), shaped like a small classification run: two
families, four configurations, 2 repeats × 3 outer folds × 2 inner folds, two metrics, one failed
inner fit, one failed outer fit and predicted probabilities for every configuration and outer fold.
"""

from __future__ import annotations

import os
from datetime import datetime, timedelta, timezone
from uuid import uuid4

import numpy as np
import pytest
from sqlalchemy import create_engine, make_url

from foldwise.payload import (
    AssessmentPayload,
    Configuration,
    Design,
    Failure,
    Family,
    FoldChoice,
    InnerScores,
    OuterFold,
    OuterScores,
    Prediction,
)
from foldwise.store import db_url_from, make_engine

N_SAMPLES, N_REPEATS, N_OUTER, N_INNER = 30, 2, 3, 2
METRICS = ["accuracy", "neg_log_loss"]
FAMILIES = [Family(name="logistic", estimator="LogisticRegression(max_iter=500)",
                   estimator_class="sklearn.linear_model.LogisticRegression"),
            Family(name="tree", estimator="DecisionTreeClassifier()",
                   estimator_class="sklearn.tree.DecisionTreeClassifier")]
CONFIGURATIONS = [
    Configuration(id='logistic:{"C":0.1}', family="logistic", params={"C": 0.1}),
    Configuration(id='logistic:{"C":1.0,"class_weight":null}', family="logistic",
                  params={"C": 1.0, "class_weight": None}),
    Configuration(id='tree:{"max_depth":2}', family="tree", params={"max_depth": 2}),
    Configuration(id='tree:{"max_depth":null,"min_samples_leaf":[1,"auto"]}', family="tree",
                  params={"max_depth": None, "min_samples_leaf": [1, "auto"]}),
]
INNER_FAILURE = (1, 2, 1, 3)  # repeat, outer fold, inner fold, config of the failed inner fit
OUTER_FAILURE = (0, 1, 2)     # repeat, outer fold, config of the failed outer refit


def build_payload(*, name: str = "logistic vs tree", dataset: str | None = "invented coins",
                  created_at: datetime | None = None, seed: int = 0) -> AssessmentPayload:
    """A complete, valid payload whose numbers come from ``seed``."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, N_SAMPLES)
    folds = []
    for repeat in range(N_REPEATS):
        order = rng.permutation(N_SAMPLES)
        for outer_fold, test in enumerate(np.array_split(order, N_OUTER)):
            folds.append(OuterFold(repeat=repeat, outer_fold=outer_fold, n_train=N_SAMPLES - len(test),
                                   test_indices=test.tolist(), y_true=y[test].tolist()))

    scores = ["score", "fit_time", "score_time"]
    inner = {name: [] for name in ["repeat", "outer_fold", "inner_fold", "config", "metric", *scores]}
    for key in np.ndindex(N_REPEATS, N_OUTER, N_INNER, len(CONFIGURATIONS), len(METRICS)):
        failed = key[:4] == INNER_FAILURE
        _append(inner, key, None if failed else _score(rng, key[-1]), None if failed else float(rng.random()))
    outer = {name: [] for name in ["repeat", "outer_fold", "config", "metric", *scores]}
    for key in np.ndindex(N_REPEATS, N_OUTER, len(CONFIGURATIONS), len(METRICS)):
        failed = key[:3] == OUTER_FAILURE
        _append(outer, key, None if failed else _score(rng, key[-1]), None if failed else float(rng.random()))

    family_winners, overall_winners = _winners(inner)
    predictions = []
    for fold in folds:
        for config in range(len(CONFIGURATIONS)):
            proba = rng.random(len(fold.test_indices))
            values = np.column_stack([1 - proba, proba])
            values[0, 0] = -0.0 if config == 0 else values[0, 0]  # signed zero and a subnormal survive too
            values[-1, 1] = 5e-324 if config == 1 else values[-1, 1]
            predictions.append(Prediction.from_array(values, repeat=fold.repeat, outer_fold=fold.outer_fold,
                                                     config=config, kind="proba"))
    failures = [Failure(level="inner", repeat=INNER_FAILURE[0], outer_fold=INNER_FAILURE[1],
                        inner_fold=INNER_FAILURE[2], config=INNER_FAILURE[3], message="ValueError: singular"),
                Failure(level="outer", repeat=OUTER_FAILURE[0], outer_fold=OUTER_FAILURE[1],
                        config=OUTER_FAILURE[2], message="MemoryError")]
    return AssessmentPayload(
        uuid=uuid4(), name=name, dataset=dataset,
        created_at=created_at or datetime(2024, 5, 6, 7, 8, 9, 123456, tzinfo=timezone(timedelta(hours=2))),
        design=Design(task="classification", n_samples=N_SAMPLES, n_features=4, n_repeats=N_REPEATS,
                      n_outer_folds=N_OUTER, n_inner_folds=N_INNER, outer_splitter="RepeatedKFold(3)",
                      inner_splitter="KFold(2)", metrics=METRICS, classes=[0, 1]),
        families=FAMILIES, configurations=CONFIGURATIONS, outer_folds=folds,
        inner_scores=InnerScores(**inner), outer_scores=OuterScores(**outer),
        family_winners=family_winners, overall_winners=overall_winners, predictions=predictions,
        failures=failures, versions={"scikit-learn": "1.5.0", "numpy": "2.0.0"},
        seeds={"outer": [seed, seed + 1], "inner": None}, total_fit_time=float(sum(inner["fit_time"][:5])))


def _score(rng: np.random.Generator, metric: int) -> float:
    return float(rng.uniform(0.5, 1.0)) if metric == 0 else float(-rng.uniform(0.1, 0.7))


def _append(columns: dict, key: tuple, score: float | None, fit_time: float | None) -> None:
    for name, value in zip(list(columns)[:len(key)], key, strict=True):
        columns[name].append(int(value))
    columns["score"].append(score)
    columns["fit_time"].append(fit_time)
    columns["score_time"].append(None if fit_time is None else fit_time / 10)


def _winners(inner: dict) -> tuple[list[FoldChoice], list[FoldChoice]]:
    """Greatest mean inner score on the first metric, within each family and then overall."""
    family_winners, overall_winners = [], []
    for repeat, outer_fold in np.ndindex(N_REPEATS, N_OUTER):
        means = {}
        for config in range(len(CONFIGURATIONS)):
            scores = [s for r, o, c, m, s in zip(inner["repeat"], inner["outer_fold"], inner["config"],
                                                 inner["metric"], inner["score"], strict=True)
                      if (r, o, c, m) == (repeat, outer_fold, config, 0)]
            if None not in scores:
                means[config] = np.mean(scores)
        best = {}
        for config, mean in means.items():
            family = CONFIGURATIONS[config].family
            if family not in best or mean > means[best[family]]:
                best[family] = config
        family_winners += [FoldChoice(repeat=repeat, outer_fold=outer_fold, config=c) for c in best.values()]
        overall = max(best.values(), key=lambda c: means[c])
        overall_winners.append(FoldChoice(repeat=repeat, outer_fold=outer_fold, config=overall))
    return family_winners, overall_winners


@pytest.fixture
def make_payload():
    return build_payload


@pytest.fixture
def db_path(tmp_path):
    return tmp_path / "store" / "foldwise.db"


PG_URL_VARIABLE = "FOLDWISE_TEST_PG_URL"
PG_UNAVAILABLE = f"PostgreSQL not available: set {PG_URL_VARIABLE} (make test starts one)"


@pytest.fixture(scope="session")
def postgres_server():
    """An AUTOCOMMIT engine on the server's database, for creating and dropping test databases.

    Skips when no server is named, except under CI, where the PostgreSQL tests must run.
    """
    url = os.environ.get(PG_URL_VARIABLE)
    if not url:
        if os.environ.get("CI"):
            pytest.fail(f"{PG_UNAVAILABLE}; under CI these tests must run, not skip", pytrace=False)
        pytest.skip(PG_UNAVAILABLE)
    server = create_engine(url, isolation_level="AUTOCOMMIT")
    yield server
    server.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request, db_path):
    """The URL of a fresh, empty store: a SQLite file under tmp_path, or a new PostgreSQL database."""
    if request.param == "sqlite":
        yield db_url_from(str(db_path))
        return
    server = request.getfixturevalue("postgres_server")
    name = f"foldwise_test_{uuid4().hex}"
    with server.connect() as connection:
        connection.exec_driver_sql(f'CREATE DATABASE "{name}"')
    yield make_url(server.url).set(database=name).render_as_string(hide_password=False)
    with server.connect() as connection:
        connection.exec_driver_sql(f'DROP DATABASE "{name}" WITH (FORCE)')


@pytest.fixture
def engine(store_url):
    engine = make_engine(store_url)
    yield engine
    engine.dispose()


@pytest.fixture
def sqlite_engine(db_path):
    """A store on a SQLite file, for what only SQLite has: its pragmas, its file read by Python's sqlite3."""
    engine = make_engine(db_url_from(str(db_path)))
    yield engine
    engine.dispose()
