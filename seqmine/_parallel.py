"""One way to run independent tasks: serially, in local processes, or on a Dask cluster.

``jobs=1`` runs in this process; ``jobs=N`` uses N local worker processes (joblib);
``scheduler="tcp://host:8786"`` (or ``"local"`` for a local Dask cluster) sends the same
tasks to Dask distributed (``pip install "seqmine[distributed]"``). Results always come
back in task order, so the output does not depend on where the tasks ran.
"""

from __future__ import annotations

from .errors import ParameterError

__all__ = ["parallel_map"]


def parallel_map(func, items, *, jobs=1, scheduler=None):
    """``[func(x) for x in items]``, possibly in parallel; order is preserved.

    Parameters
    ----------
    func : callable
        A module-level function (it is sent to other processes).
    items : iterable
    jobs : int
        Local worker processes (1 = serial; -1 = all cores).
    scheduler : str, optional
        Dask scheduler address, or ``"local"`` for a local cluster with ``jobs`` workers.

    Returns
    -------
    list

    Examples
    --------
    >>> parallel_map(abs, [-2, 3, -1])
    [2, 3, 1]
    """
    items = list(items)
    if scheduler:
        return _dask_map(func, items, scheduler, jobs)
    if jobs is None or jobs == 1 or len(items) <= 1:
        return [func(x) for x in items]
    if not isinstance(jobs, int) or jobs == 0 or jobs < -1:
        raise ParameterError(f"The 'jobs' parameter must be a positive int or -1. Got {jobs!r} instead.")
    from joblib import Parallel, delayed

    from ._progress import is_quiet
    quiet = is_quiet()  # worker processes start with their own switch: pass it on
    return list(Parallel(n_jobs=jobs)(delayed(_call_quietly)(func, x, quiet) for x in items))


def _call_quietly(func, item, quiet):
    from ._progress import is_quiet, set_quiet
    before = is_quiet()
    set_quiet(quiet)
    try:
        return func(item)
    finally:
        set_quiet(before)


def _dask_map(func, items, scheduler, jobs):
    from ._progress import is_quiet
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ParameterError(
            "Running on a Dask cluster needs the distributed extra: "
            "pip install \"seqmine[distributed]\".") from None
    if scheduler == "local":
        n = jobs if isinstance(jobs, int) and jobs > 0 else 2
        with LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster, Client(cluster) as client:
            return client.gather(client.map(_call_quietly, [func] * len(items), items,
                                            [is_quiet()] * len(items), pure=False))
    try:
        client = Client(scheduler, timeout="20s")
    except OSError as exc:
        raise ParameterError(
            f"Cannot reach the Dask scheduler at {scheduler!r} ({exc}); check the address "
            f"or drop --scheduler to run locally.") from None
    with client:
        return client.gather(client.map(_call_quietly, [func] * len(items), items,
                                        [is_quiet()] * len(items), pure=False))
