"""Split-half replication: is a finding found in one random half of the learners
confirmed in the other?"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .._util.checks import check_int
from ..config import DEFAULT_CONFIG
from .adjusted import CellCounter, cmh_from_counts, order_tables
from .effects import chi2_presence, fisher_exact_many
from .evidence import direction_from_excess

__all__ = ["split_half_replication", "split_halves", "REPLICATION_TESTS"]

#: Tests a replication can be about: the raw presence test, the volume-adjusted
#: test and the order test.
REPLICATION_TESTS = ("raw", "volume", "order")


def split_halves(labels, n_splits, random_state):
    """Random halves of the units, balanced within each group.

    Split ``r`` shuffles each group's units with ``rng.permutation`` (``rng =
    numpy.random.default_rng([random_state, 2])``, groups in index order, splits in turn) and
    puts the first ``floor(n_g / 2)`` in half 0, the rest in half 1.

    Returns
    -------
    ndarray of int8, shape (n_splits, n_units)
        Half (0 or 1) of each unit in each split.

    Examples
    --------
    >>> h = split_halves(np.array([0, 0, 0, 0, 1, 1]), 3, random_state=0)
    >>> h.shape, h[:, :4].sum(axis=1).tolist(), h[:, 4:].sum(axis=1).tolist()
    ((3, 6), [2, 2, 2], [1, 1, 1])
    """
    labels = np.asarray(labels, dtype=np.int64)
    rng = np.random.default_rng([int(random_state), 2])
    members = [np.flatnonzero(labels == g) for g in range(int(labels.max()) + 1)] \
        if len(labels) else []
    out = np.zeros((int(n_splits), len(labels)), dtype=np.int8)
    for r in range(int(n_splits)):
        for mem in members:
            perm = rng.permutation(mem)
            out[r, perm[len(mem) // 2:]] = 1
    return out


def split_half_replication(presence, labels, n_groups, tests, directions, *, alpha=0.05,
                           n_splits=DEFAULT_CONFIG["contrast"]["n_replication_splits"],
                           random_state=DEFAULT_CONFIG["seed"], strata=None, token_counts=None,
                           lengths=None, patterns=None):
    """Share of random half splits in which each pattern's finding holds in both halves.

    Parameters
    ----------
    presence : sparse matrix, shape (n_units, n_patterns)
    labels : ndarray of int, shape (n_units,)
        Group index of each unit.
    n_groups : int
    tests : array_like of str, shape (n_patterns,)
        Which test each pattern's finding rests on (:data:`REPLICATION_TESTS`); any
        other value (e.g. ``""`` for a pattern without a finding) gives NaN, and such
        patterns cost nothing.
    directions : array_like of int, shape (n_patterns,)
        Group the full data favour (-1 = none: never replicates).
    alpha : float
        Nominal (uncorrected) level in each half.
    n_splits : int
        Random splits (:func:`split_halves`).
    random_state : int
    strata : ndarray of int, optional
        Activity stratum per unit (needed for ``"volume"`` and ``"order"``).
    token_counts : sparse matrix, optional
        Token counts per unit (needed for ``"order"``).
    lengths : ndarray, optional
        Tokens per unit (for ``"order"``; default: row sums of ``token_counts``).
    patterns : list of tuple of int, optional
        Token ids per pattern (needed for ``"order"``).

    Returns
    -------
    ndarray of float, shape (n_patterns,)
        Fraction of splits in which the test has p <= ``alpha`` in *both* halves and
        both favour the full-data group: found in one half, confirmed in the other
        (NaN for patterns without a test).

    Notes
    -----
    Each half holds about half the learners of every group, so a real but moderate
    difference reaches ``alpha`` in a half less often than on the full data: the
    figure measures replication at half the sample size, not the chance that the
    finding is true. Under no difference it lies between ``(alpha / 2) ** 2`` and
    ``alpha ** 2`` (two independent halves, each significant in the full-data
    direction, which the halves themselves make more likely).

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> pres = sp.csr_matrix(np.r_[np.ones((20, 1)), np.zeros((20, 1))])
    >>> float(split_half_replication(pres, np.repeat([0, 1], 20), 2, ["raw"], [0],
    ...                              n_splits=5)[0])
    1.0
    """
    n_splits = check_int(n_splits, "n_replication_splits", "contrast", minimum=0)
    labels = np.asarray(labels, dtype=np.int64)
    tests = np.asarray(tests, dtype=object)
    directions = np.asarray(directions, dtype=np.int64)
    m = presence.shape[1]
    out = np.full(m, np.nan)
    if n_splits == 0 or m == 0:
        return out
    use = {t: np.flatnonzero(tests == t) for t in REPLICATION_TESTS}
    counted = np.sort(np.concatenate([use["raw"], use["volume"]]))
    if len(counted) == 0 and len(use["order"]) == 0:
        return out
    halves = split_halves(labels, n_splits, random_state).astype(np.int64)
    n_s = int(strata.max()) + 1 if strata is not None and len(strata) else 1
    st = strata if strata is not None else np.zeros(len(labels), dtype=np.int64)
    hits = np.zeros(m, dtype=np.int64)
    presence = sp.csc_matrix(presence)
    order_tabs = None
    if len(use["order"]):
        if lengths is None:
            lengths = np.asarray(token_counts.sum(axis=1)).ravel()
        # the whole data once, then half 0 of every split; half 1 is the difference
        tabs = order_tables(presence[:, use["order"]], token_counts, lengths,
                            [patterns[i] for i in use["order"]],
                            [(labels, n_groups)]
                            + [(np.where(halves[r] == 0, labels, -1), n_groups)
                               for r in range(n_splits)], n_s)
        whole = tabs[0]
        order_tabs = [tuple(np.stack([h, w - h]) for h, w in zip(tabs[r + 1], whole))
                      for r in range(n_splits)]
    # only the patterns that need per-half presence counts are counted
    counter = CellCounter(presence[:, counted])
    local = {t: np.searchsorted(counted, use[t]) for t in ("raw", "volume")}
    for r in range(n_splits):
        sub = halves[r] * n_groups + labels
        x = counter.counts(sub, st, 2 * n_groups, n_s).reshape(2, n_groups, n_s, -1)
        sizes = np.bincount(sub * n_s + st, minlength=2 * n_groups * n_s).reshape(
            2, n_groups, n_s).astype(np.float64)
        p = np.ones((2, m))
        fav = np.full((2, m), -1, dtype=np.int64)
        if len(use["raw"]):
            j, jl = use["raw"], local["raw"]
            for h in (0, 1):
                p[h, j], fav[h, j] = _raw_test(x[h][:, :, jl].sum(axis=1),
                                               sizes[h].sum(axis=1))
        if len(use["volume"]):
            j, jl = use["volume"], local["volume"]
            p[:, j], fav[:, j] = _both_halves(x[:, :, :, jl], sizes[:, :, :, None])
        if order_tabs is not None:
            j = use["order"]
            xo, el = order_tabs[r]                  # each (2, G, S, k)
            p[:, j], fav[:, j] = _both_halves(xo, el)
        hits += np.all((p <= alpha) & (fav == directions) & (directions >= 0), axis=0)
    done = np.concatenate([counted, use["order"]])
    out[done] = hits[done] / n_splits
    return out


def _both_halves(x, sizes):
    """Stratified test in each half at once: x (2, G, S, k), sizes broadcastable to it;
    returns p-values and favoured groups, each (2, k)."""
    k = x.shape[-1]
    sizes = np.broadcast_to(sizes, x.shape)
    flat = (np.moveaxis(a, 0, 2).reshape(a.shape[1], a.shape[2], 2 * k) for a in (x, sizes))
    xs, ns = flat
    p, _, ex = cmh_from_counts(xs, ns)
    fav = direction_from_excess(ex, ns.sum(axis=1))
    return p.reshape(2, k), fav.reshape(2, k)


def _raw_test(present, sizes):
    """p-value and favoured group of the plain presence test: (G, k) counts, (G,) sizes."""
    sizes = np.asarray(sizes, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = present / np.where(sizes > 0, sizes, 1.0)[:, None]
    if present.shape[0] == 2:
        a = present[0].astype(np.int64)
        c = present[1].astype(np.int64)
        p = fisher_exact_many(a, int(sizes[0]) - a, c, int(sizes[1]) - c)
        fav = np.where(frac[0] > frac[1], 0, np.where(frac[0] < frac[1], 1, -1))
        return p, fav
    p = chi2_presence(present, sizes)[1]
    return p, np.argmax(frac, axis=0)
