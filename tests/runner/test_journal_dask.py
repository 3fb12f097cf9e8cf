"""A run on a Dask cluster is journaled where nested_cv runs, and resumes anywhere: here, locally."""

from __future__ import annotations

import os

import counted_fits
import joblib
import pytest
from pandas.testing import assert_frame_equal

from foldwise import nested_cv

try:
    from distributed import Client, LocalCluster
except ImportError:  # the optional extra: pip install 'foldwise[dask]'
    if os.environ.get("CI"):
        raise
    pytest.skip("distributed is not installed: pip install 'foldwise[dask]' (under CI this test must run)",
                allow_module_level=True)


def test_a_cluster_run_journal_resumes_locally_with_nothing_to_fit(tmp_path, cancer, monkeypatch):
    X, y = cancer
    path, log = tmp_path / "run.journal", tmp_path / "fits.log"
    space = {"tree": (counted_fits.CountedClassifier(), {"max_depth": [1, 2, 3]})}

    def run(**options):
        return nested_cv(space, X, y, outer=3, inner=2, scoring="roc_auc", progress=False, checkpoint=path,
                         **options)

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=":0") as cluster, \
            Client(cluster), joblib.parallel_config(backend="dask"):
        remote = run(n_jobs=2)
    monkeypatch.setenv(counted_fits.LOG, str(log))
    local = run(n_jobs=1)
    assert counted_fits.count(log) == 0  # every fit came from the journal
    for name in ("inner_scores", "outer_scores", "winners"):  # times too: they are the journal's
        assert_frame_equal(getattr(local, name), getattr(remote, name), check_exact=True)
    assert len(local.inner_scores) == 3 * 2 * 3
    assert [p.data for p in local.payload.predictions] == [p.data for p in remote.payload.predictions]
