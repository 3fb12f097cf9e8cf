"""The data a run's tasks read, placed once where the pool's workers are."""

from __future__ import annotations

from joblib.parallel import get_active_backend


def data_for_workers(X, y) -> tuple:
    """``X`` and ``y`` as every task of the run should receive them.

    Under ``joblib.parallel_config(backend="dask")`` they are scattered once to every worker of the
    cluster (``Client.scatter(..., broadcast=True)``) and the tasks carry futures, which Dask resolves to
    the copy already on the worker. Left to itself, joblib's Dask backend scatters large arguments anew
    for each call of the pool and to one worker, whence the others fetch them; a run that refits after
    the inner folds' choices calls the pool twice. Any other backend gets the data as it is.
    """
    backend, _ = get_active_backend()
    client = getattr(backend, "client", None)  # joblib's Dask backend keeps its distributed.Client here
    if client is None or not hasattr(client, "scatter"):
        return X, y
    scattered_X, scattered_y = client.scatter([X, y], broadcast=True)
    return scattered_X, scattered_y
