"""Mining split by first item, run in local processes or on a Dask cluster, merged exactly.

Every frequent pattern starts with one item, so the patterns starting with different
items are independent searches over the same database. :func:`mine_parallel` splits
the first items into balanced partitions, mines each with
``mine(..., first_items=part)`` through :func:`seqmine._util.parallel.parallel_map`, and
merges the pieces into the PatternSet the serial :func:`seqmine.mining.miner.mine` returns:
same patterns, same order, same supports and instance counts, same constraints.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .._util.checks import check_int
from .._util.parallel import n_workers, parallel_map
from .._util.progress import quiet_mode
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import ParameterError, PatternExplosionError
from .miner import DEFAULT_MAX_PATTERNS, _superpattern_flags, mine
from .patterns import PatternSet

__all__ = ["mine_parallel"]


_DEFAULTS = DEFAULT_CONFIG["mine"]


def mine_parallel(db, *, n_jobs=DEFAULT_CONFIG["n_jobs"], scheduler=None, partitions=None,
                  min_support=_DEFAULTS["min_support"], min_length=_DEFAULTS["min_length"],
                  max_length=_DEFAULTS["max_length"], closed=_DEFAULTS["closed"],
                  maximal=_DEFAULTS["maximal"], end_with_action=_DEFAULTS["end_with_action"],
                  max_patterns=DEFAULT_MAX_PATTERNS, **params):
    """:func:`seqmine.mining.miner.mine` with the search split by first item; identical output.

    Parameters
    ----------
    db : SequenceDB
    n_jobs : int
        Local worker processes (1 = serial, -1 = all cores); with ``scheduler``, the
        number of workers of a ``"local"`` cluster.
    scheduler : str, optional
        Dask scheduler address (``"tcp://host:8786"``) or ``"local"``.
    partitions : int, optional
        Number of first-item partitions (default: twice the workers, at most the
        number of distinct tokens).
    min_support, min_length, max_length, closed, maximal, end_with_action, max_patterns, **params
        As in :func:`seqmine.mining.miner.mine`.

    Returns
    -------
    PatternSet
        Equal to ``mine(db, ...)`` with the same parameters.

    Notes
    -----
    Each partition is mined with ``min_length=1``, ``end_with_action=False`` and no
    closed/maximal filter, so that the merged set holds every frequent pattern the
    serial search visits: the ``max_patterns`` limit is then checked on the same
    total, and the length/last-item filters and the closed/maximal filters (which
    compare patterns across partitions) run once on the merged set. Partitions are
    balanced greedily by token frequency (largest first, to the lightest partition).

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "c"], ["a", "c"], ["b", "c"]])
    >>> mine_parallel(db, min_support=2, min_length=1, max_length=2, max_gap=None,
    ...               partitions=2).names
    ['a', 'b', 'c', 'a > c', 'b > c']
    """
    where = "mine"
    kwargs = dict(min_support=min_support, min_length=min_length, max_length=max_length,
                  closed=closed, maximal=maximal, end_with_action=end_with_action,
                  max_patterns=max_patterns, **params)
    serial = (n_jobs is None or n_jobs == 1) and not scheduler and partitions is None
    if serial:
        return mine(db, **kwargs)
    if not isinstance(db, SequenceDB):
        return mine(db, **kwargs)   # raises the miner's own message
    min_length = check_int(min_length, "min_length", where, minimum=1)
    max_length = check_int(max_length, "max_length", where, minimum=min_length, allow_none=True)
    max_patterns = check_int(max_patterns, "max_patterns", where, minimum=1)
    for name, val in (("closed", closed), ("maximal", maximal),
                      ("end_with_action", end_with_action)):
        if not isinstance(val, (bool, np.bool_)):
            raise ParameterError(f"The '{name}' parameter of mine must be True or False. "
                                 f"Got {val!r} instead.")
    if params.get("max_window") is not None:
        # the same check as the serial miner (window shorter than the shortest pattern)
        mw = check_int(params["max_window"], "max_window", where, minimum=1)
        if mw < min_length:
            return mine(db, **kwargs)   # raises the miner's own message
    workers = n_workers(n_jobs, where)
    n_parts = check_int(partitions, "partitions", where, minimum=1, allow_none=True)
    parts = _partition_first_items(db, n_parts or 2 * workers)
    slim = _slim(db)
    part_kw = dict(kwargs, min_length=1, end_with_action=False, closed=False, maximal=False)
    pieces = parallel_map(_mine_partition, [(slim, p, part_kw) for p in parts],
                          n_jobs=n_jobs, scheduler=scheduler)
    return _merge(db, pieces, min_length=min_length, end_with_action=bool(end_with_action),
                  closed=bool(closed), maximal=bool(maximal), max_patterns=max_patterns)


# --------------------------------------------------------------------- helpers
def _partition_first_items(db, n_parts):
    """Token ids split into at most ``n_parts`` groups of similar total frequency."""
    freq = np.bincount(db.tokens, minlength=len(db.vocab)).astype(np.int64)
    present = np.flatnonzero(freq > 0)
    n_parts = max(1, min(n_parts, len(present)))
    load = np.zeros(n_parts, dtype=np.int64)
    parts = [[] for _ in range(n_parts)]
    for t in present[np.argsort(-freq[present], kind="stable")].tolist():
        j = int(np.argmin(load))
        parts[j].append(t)
        load[j] += freq[t]
    return [sorted(p) for p in parts if p]


def _slim(db):
    """What the miner reads, without times, rows or identifiers (sent to each worker):
    learners travel as numbers, which is all that learner support needs."""
    learner_codes = np.unique(db.learners, return_inverse=True)[1].ravel()
    return (db.tokens, db.offsets, list(db.vocab), db.is_pause, db.groups,
            list(db.group_names), learner_codes)


def _mine_partition(task):
    (tokens, offsets, vocab, is_pause, groups, group_names, learner_codes), part, kwargs = task
    n_tok, n_seq = len(tokens), len(offsets) - 1
    db = SequenceDB(tokens=tokens, offsets=offsets, vocab=vocab, is_pause=is_pause,
                    times=np.broadcast_to(np.float64(0), n_tok),
                    source_rows=np.broadcast_to(np.int64(0), n_tok),
                    learners=learner_codes.astype(str).astype(object),
                    sessions=np.full(n_seq, "", dtype=object),
                    groups=groups, group_names=group_names)
    with quiet_mode():  # one bar per partition would interleave
        return mine(db, first_items=part, **kwargs)


def _serial_key(ps):
    """Sort key of the serial miner's output order, read from its constraints."""
    order = str(ps.constraints.get("order", ""))
    if "last item" in order:
        return lambda p: (len(p), tuple(reversed(p)))
    return lambda p: (len(p), tuple(p))


def _merge(db, pieces, *, min_length, end_with_action, closed, maximal, max_patterns):
    first = pieces[0]
    pats = [p for ps in pieces for p in ps.patterns]
    if len(pats) > max_patterns:
        raise PatternExplosionError(
            f"Mining stopped: more than {max_patterns} frequent patterns. Raise "
            f"'max_patterns' (--max-patterns) if you need them all, or raise "
            f"'min_support', lower 'max_length' or set 'max_gap'.")
    G = len(first.group_names)
    support = np.concatenate([ps.support_counts for ps in pieces]) if pats else \
        np.zeros((0, G), dtype=np.int64)
    key = _serial_key(first)
    order = sorted(range(len(pats)), key=lambda i: key(pats[i]))
    keep = np.array([len(pats[i]) >= min_length and
                     not (end_with_action and db.is_pause[pats[i][-1]]) for i in order],
                    dtype=bool)
    order = np.asarray(order, dtype=np.int64)[keep] if len(order) else np.zeros(0, np.int64)
    sel_pats = [pats[i] for i in order.tolist()]
    sel_support = support[order]
    if (closed or maximal) and sel_pats:
        not_closed, not_maximal = _superpattern_flags(sel_pats, sel_support, len(db.vocab))
        ok = np.ones(len(sel_pats), dtype=bool)
        if closed:
            ok &= ~not_closed
        if maximal:
            ok &= ~not_maximal
        order = order[ok]
    counts = sp.hstack([ps.counts for ps in pieces], format="csc")[:, order].tocsr()
    counts = counts.astype(first.counts.dtype)
    counts.sort_indices()
    constraints = dict(first.constraints)
    constraints.update(min_length=min_length, end_with_action=end_with_action,
                       closed=closed, maximal=maximal)
    return PatternSet(
        patterns=[pats[i] for i in order.tolist()], vocab=list(db.vocab),
        is_pause=db.is_pause.copy(), group_names=list(first.group_names),
        group_sizes=first.group_sizes, support_counts=support[order], counts=counts,
        seq_groups=first.seq_groups, constraints=constraints)
