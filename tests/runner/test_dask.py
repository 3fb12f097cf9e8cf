"""The one pool on a Dask cluster of worker processes: the local results, with the data sent once."""

from __future__ import annotations

import os

import joblib
import pytest
from pandas.testing import assert_frame_equal
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

from foldwise import nested_cv

try:
    from distributed import Client, LocalCluster, get_task_stream
except ImportError:  # the optional extra: pip install 'foldwise[dask]'
    if os.environ.get("CI"):
        raise
    pytest.skip("distributed is not installed: pip install 'foldwise[dask]' (under CI this test must run)",
                allow_module_level=True)

SCORES = ["repeat", "outer_fold", "family", "config", "metric", "score"]


@pytest.fixture(scope="module")
def client():
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster, \
            Client(cluster) as connected:
        yield connected


@pytest.fixture(scope="module")
def space():
    return {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                         {"logisticregression__C": [0.1, 1.0]}),
            "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [2, 3]})}


def _run(space, X, y, **options):
    return nested_cv(space, X, y, outer=3, inner=3, scoring=["roc_auc", "accuracy"], progress=False,
                     **options)


@pytest.mark.parametrize("refit_all", [True, False])  # the pool called once, or again for the winners' refits
def test_a_local_cluster_gives_the_local_results(client, space, cancer, refit_all):
    X, y = cancer
    local = _run(space, X, y, n_jobs=1, refit_all=refit_all)
    with joblib.parallel_config(backend="dask"), get_task_stream(client) as stream:
        remote = _run(space, X, y, n_jobs=2, refit_all=refit_all)
    assert len({task["worker"] for task in stream.data}) == 2  # the fits ran in both worker processes
    assert len(local.inner_scores) == 3 * 3 * 4 * 2  # nothing compared empty
    for name in ("inner_scores", "outer_scores"):  # every column but the timings
        assert_frame_equal(getattr(local, name)[SCORES], getattr(remote, name)[SCORES])
    assert_frame_equal(local.winners, remote.winners)
    assert_frame_equal(local.family_winners, remote.family_winners)
    assert [(p.repeat, p.outer_fold, p.config, p.kind, p.data) for p in local.payload.predictions] == \
        [(p.repeat, p.outer_fold, p.config, p.kind, p.data) for p in remote.payload.predictions]


def _data_received(dask_worker) -> dict[str, list[str]]:
    """Keys a worker was sent by scatter, and keys it fetched from another worker, in order."""
    return {"scattered": [entry[0] for entry in dask_worker.state.log if entry[1] == "receive-from-scatter"],
            "fetched": [key for entry in dask_worker.transfer_incoming_log for key in entry["keys"]]}


def test_x_and_y_reach_each_worker_once_for_the_whole_run(client, space, cancer):
    X, y = cancer
    before = client.run(_data_received)
    with joblib.parallel_config(backend="dask"):
        _run(space, X, y, n_jobs=2, refit_all=False)  # the pool is called twice: fits, then winners' refits
    after = client.run(_data_received)
    received = {worker: {kind: after[worker][kind][len(before[worker][kind]):] for kind in after[worker]}
                for worker in after}
    # Sent with every task, nothing would be scattered; joblib's own scattering would send X and y again
    # for the second call, to one worker each, and the other worker would fetch them from it.
    scattered = [sorted(log["scattered"]) for log in received.values()]
    assert len(scattered) == 2 and scattered[0] == scattered[1]
    assert len(scattered[0]) == 2 and all(key.startswith("ndarray-") for key in scattered[0])  # X and y
    # ... and no worker fetched them from the other. (A task the scheduler moved under load may fetch its
    # own small arguments; those are not the data.)
    fetched = {key for log in received.values() for key in log["fetched"]}
    assert not fetched & set(scattered[0]), received
