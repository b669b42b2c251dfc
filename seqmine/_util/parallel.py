"""One way to run independent tasks: serially, in local processes, or on a Dask cluster.

``n_jobs=1`` runs in this process; ``n_jobs=N`` uses N local worker processes (joblib);
``scheduler="tcp://host:8786"`` (or ``"local"`` for a local Dask cluster) sends the same
tasks to Dask distributed (``pip install "seqmine[distributed]"``). Results always come
back in task order, so the output does not depend on where the tasks ran.
"""

from __future__ import annotations

import contextlib
import functools
import os
import sys

from ..errors import ParameterError
from .checks import check_jobs
from .progress import is_quiet, quiet_mode, use_thread_lock

__all__ = ["parallel_map", "using_scheduler", "n_workers", "available_cores", "effective_jobs"]

#: Clients opened by :func:`using_scheduler`, innermost last: (scheduler, client).
_ACTIVE = []


def parallel_map(func, items, *, n_jobs=1, scheduler=None):
    """``[func(x) for x in items]``, possibly in parallel; order is preserved.

    Parameters
    ----------
    func : callable
        A module-level function (it is sent to other processes).
    items : iterable
    n_jobs : int
        Local worker processes (1 = serial; -1 = all cores).
    scheduler : str, optional
        Dask scheduler address, or ``"local"`` for a local cluster with ``n_jobs`` workers.

    Returns
    -------
    list

    Examples
    --------
    >>> parallel_map(abs, [-2, 3, -1])
    [2, 3, 1]
    """
    items = list(items)
    if n_jobs is not None:
        n_jobs = check_jobs(n_jobs, "n_jobs")
    if not scheduler and (n_jobs is None or n_jobs == 1 or len(items) <= 1):
        return [func(x) for x in items]
    # worker processes start with default settings: carry the quiet switch over
    func = functools.partial(_call_with_quiet, func, is_quiet())
    if scheduler:
        return _dask_map(func, items, scheduler, n_jobs)
    from joblib import Parallel, delayed
    n_jobs = min(effective_jobs(n_jobs), len(items))
    if n_jobs == 1:
        return [func(x) for x in items]
    return list(Parallel(n_jobs=n_jobs)(delayed(func)(x) for x in items))


def n_workers(n_jobs, where=""):
    """The number of worker processes ``n_jobs`` stands for: -1 = every available core,
    None = 1.

    Examples
    --------
    >>> n_workers(3), n_workers(None), n_workers(-1) == available_cores()
    (3, 1, True)
    """
    if n_jobs is None:
        return 1
    n_jobs = check_jobs(n_jobs, "n_jobs", where)
    return available_cores() if n_jobs == -1 else n_jobs


def available_cores():
    """Cores this process may run on (its CPU affinity; at least 1).

    Examples
    --------
    >>> available_cores() >= 1
    True
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def effective_jobs(n_jobs, *, notify=False):
    """Local worker processes for ``n_jobs``: ``-1`` means every available core, and more
    than the available cores is capped to them (more processes than cores only adds
    overhead). With ``notify`` a capped value is said on standard error. A value that is
    no worker count is returned unchanged (the caller's check names it).

    Examples
    --------
    >>> effective_jobs(1), effective_jobs(-1) == available_cores()
    (1, True)
    >>> effective_jobs(10**6) == available_cores()
    True
    """
    if not (isinstance(n_jobs, int) and (n_jobs >= 1 or n_jobs == -1)) or isinstance(n_jobs, bool):
        return n_jobs  # not a worker count: left to the caller's own check and message
    workers = n_workers(n_jobs)
    cores = available_cores()
    if workers > cores:
        if notify and not is_quiet():
            print(f"seqmine: note: {n_jobs} jobs asked for, but only {cores} core(s) are "
                  f"available; using {cores}.", file=sys.stderr)
        return cores
    return workers


@contextlib.contextmanager
def using_scheduler(scheduler, n_jobs=1):
    """Connect to a Dask cluster once for a block of work.

    Inside the block, :func:`parallel_map` calls with the same ``scheduler`` reuse the
    connection (a ``"local"`` cluster is started once, not per call) and calls without a
    scheduler but with ``n_jobs > 1`` (hidden Markov model restarts) run on the cluster too. With
    ``scheduler=None`` nothing happens.

    Parameters
    ----------
    scheduler : str or None
        Dask scheduler address or ``"local"``.
    n_jobs : int
        Workers of a ``"local"`` cluster.

    Yields
    ------
    distributed.Client or None

    Examples
    --------
    >>> with using_scheduler(None) as client:
    ...     parallel_map(abs, [-1, 2])
    [1, 2]
    """
    if not scheduler:
        yield None
        return
    if not isinstance(scheduler, str):
        raise ParameterError(f"The 'scheduler' option must be a Dask address such as "
                             f"'tcp://host:8786' or 'local'. Got {scheduler!r} instead.")
    import joblib
    stack = contextlib.ExitStack()
    with stack:
        client = _connect(scheduler, n_jobs, stack)
        _ACTIVE.append((scheduler, client))
        try:
            with joblib.parallel_config(backend="dask"):
                yield client
        finally:
            _ACTIVE.pop()


def _call_with_quiet(func, quiet, item):
    use_thread_lock()  # no process-shared semaphore a stopped worker could leak
    with quiet_mode(quiet):
        return func(item)


def _connect(scheduler, n_jobs, stack):
    """A Client for ``scheduler`` whose shutdown is registered on ``stack``."""
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ParameterError(
            "Running on a Dask cluster needs the distributed extra: "
            "pip install \"seqmine[distributed]\".") from None
    if scheduler == "local":
        n = n_jobs if isinstance(n_jobs, int) and n_jobs > 0 else 2
        cluster = stack.enter_context(LocalCluster(
            n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0"))
        return stack.enter_context(Client(cluster))
    try:
        client = Client(scheduler, timeout="20s")
    except OSError as exc:
        raise ParameterError(
            f"Cannot reach the Dask scheduler at {scheduler!r} ({exc}); check the address "
            f"or drop --scheduler to run locally.") from None
    return stack.enter_context(client)


def _dask_map(func, items, scheduler, n_jobs):
    for active, client in reversed(_ACTIVE):
        if active == scheduler:
            return client.gather(client.map(func, items, pure=False))
    with contextlib.ExitStack() as stack:
        client = _connect(scheduler, n_jobs, stack)
        return client.gather(client.map(func, items, pure=False))
