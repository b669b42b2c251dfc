"""Label-permutation and bootstrap machinery over a sparse presence matrix (no loop per pattern)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy import special, stats

from .._util.checks import check_int
from .._util.parallel import n_workers, parallel_map
from .._util.progress import progress
from ..config import DEFAULT_CONFIG
from ..errors import ParameterError
from .effects import (
    FISHER_RTOL,
    _log_factorials,
    _sparse_ranks,
    chi2_presence,
    fisher_exact_many,
    fisher_table,
)

__all__ = ["westfall_young_minp", "westfall_young_rates", "bootstrap_significance",
           "presence_pvalues"]

#: Default budget of entries of one (patterns x permutations) batch.
_BATCH_ENTRIES = 2_000_000
_CONTRAST = DEFAULT_CONFIG["contrast"]


def westfall_young_minp(presence, labels, *, n_permutations=_CONTRAST["n_permutations"],
                        random_state=DEFAULT_CONFIG["seed"], batch_size=None,
                        n_jobs=DEFAULT_CONFIG["n_jobs"], scheduler=None):
    """Westfall-Young step-down min-P adjusted p-values for all patterns at once.

    Parameters
    ----------
    presence : sparse matrix, shape (n_sequences, n_patterns)
        1 where the pattern occurs in the sequence.
    labels : array_like of int, shape (n_sequences,)
        Group index ``0 .. k-1`` of each sequence (``k >= 2``).
    n_permutations : int
        Number of label permutations ``B``.
    random_state : int
        Seed of ``numpy.random.default_rng``; permutation ``b`` (``b = 0 .. B-1``) is
        ``rng.permutation(labels)`` drawn in that order, so the result does not depend
        on ``batch_size``.
    batch_size : int, optional
        Permutations handled per sparse product; default keeps
        ``n_patterns * batch_size`` near two million entries.
    n_jobs, scheduler
        Run contiguous chunks of the permutation stream in ``n_jobs`` local processes
        or on a Dask cluster (see :func:`seqmine._util.parallel.parallel_map`). Each chunk
        starts from the generator state the serial run has there, so the
        permutations, and the result, are identical to the serial run.

    Returns
    -------
    raw : ndarray of float, shape (n_patterns,)
        Unadjusted p-values: two-sided Fisher exact test when ``k == 2``, Pearson
        chi-square on the (group x present/absent) table otherwise.
    adjusted : ndarray of float, shape (n_patterns,)
        Family-wise adjusted p-values.

    Notes
    -----
    Algorithm 2.8 of Westfall & Young (1993), *Resampling-Based Multiple Testing*:
    sort the observed p-values ``p(1) <= ... <= p(m)``; in each permutation compute
    every pattern's p-value ``p*`` from the permuted group counts (one sparse product
    ``presence.T @ indicator`` per batch of permutations; for two groups the Fisher
    p-value is looked up in a table per pattern support, since the support total is
    invariant under permutation), and the successive minima
    ``q*(j) = min(p*(j), ..., p*(m))``. The adjusted p-value is
    ``(1 + #{b: q*_b(j) <= p(j)}) / (B + 1)``, made monotone by a running maximum.
    The ``+ 1`` counts the observed labelling as one permutation (Phipson & Smyth
    2010), so no adjusted p-value is 0. Memory: the Fisher tables hold one value per
    possible count for each distinct support total (at most
    ``n_distinct_supports * min(n_0, n_1)`` floats).

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> pres = sp.csr_matrix(np.array([[1, 0], [1, 1], [1, 0], [0, 1], [0, 1], [0, 0]]))
    >>> raw, adj = westfall_young_minp(pres, [0, 0, 0, 1, 1, 1], n_permutations=200,
    ...                             random_state=1)
    >>> raw.round(3).tolist()
    [0.1, 1.0]
    >>> bool(adj[0] >= raw[0])
    True
    """
    n_permutations = check_int(n_permutations, "n_permutations", "westfall_young_minp",
                               minimum=1)
    labels = np.asarray(labels, dtype=np.int64)
    pt, sizes = _prepare(presence, labels)
    n_groups = len(sizes)
    m = pt.shape[0]
    if m == 0:
        return np.zeros(0), np.zeros(0)
    pfunc = _pvalue_function(pt, sizes)
    raw = pfunc(_group_counts(pt, labels[:, None], n_groups))[:, 0]
    adjusted = _step_down_minp(raw, lambda perm: pfunc(_group_counts(pt, perm, n_groups)),
                               labels, n_permutations, random_state,
                               _batch_size(batch_size, m), n_jobs=n_jobs, scheduler=scheduler)
    return raw, adjusted


def westfall_young_rates(rates, labels, *, n_permutations=_CONTRAST["n_permutations"],
                         random_state=DEFAULT_CONFIG["seed"], batch_size=None,
                         n_jobs=DEFAULT_CONFIG["n_jobs"], scheduler=None):
    """Westfall-Young step-down min-P adjustment of the rank test on rates.

    Parameters
    ----------
    rates : sparse matrix, shape (n_sequences, n_patterns)
        Non-negative per-sequence rates (absent entries are 0).
    labels : array_like of int, shape (n_sequences,)
        Group index ``0 .. k-1`` of each sequence (``k >= 2``).
    n_permutations, random_state, batch_size, n_jobs, scheduler
        As in :func:`westfall_young_minp` (the same seed draws the same permutations).

    Returns
    -------
    raw : ndarray of float, shape (n_patterns,)
        Normal-approximation Mann-Whitney p-values with tie and continuity correction
        (two groups; ``scipy.stats.mannwhitneyu(method="asymptotic")``) or
        Kruskal-Wallis p-values (more groups), used as the permutation statistic.
    adjusted : ndarray of float, shape (n_patterns,)
        Family-wise adjusted p-values.

    Notes
    -----
    Ranks (with ties and the tie correction) do not change when labels are permuted;
    only which sequences carry them does. Each group's rank sum in every permutation
    is therefore one sparse product ``ranks.T @ indicator`` plus the group's count
    of zeros times the zeros' mid-rank, so the whole family is recomputed per batch
    of permutations without a loop over patterns.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> x = sp.csr_matrix(np.array([[3., 0], [2, 1], [4, 0], [0, 1], [1, 2], [0, 0]]))
    >>> raw, adj = westfall_young_rates(x, [0, 0, 0, 1, 1, 1], n_permutations=100)
    >>> bool(adj[0] >= raw[0] * 0.5)
    True
    """
    n_permutations = check_int(n_permutations, "n_permutations", "westfall_young_rates",
                               minimum=1)
    labels = np.asarray(labels, dtype=np.int64)
    x = sp.csc_matrix(rates, dtype=np.float64, copy=True)
    if x.shape[0] != len(labels):
        raise ParameterError(
            f"rates has {x.shape[0]} rows but labels has {len(labels)} entries.")
    _, sizes = _prepare(sp.csr_matrix(x.shape), labels)
    m = x.shape[1]
    if m == 0:
        return np.zeros(0), np.zeros(0)
    ranks, zeros, tie_term = _sparse_ranks(x)
    # x is CSC (sorted, zeros eliminated by _sparse_ranks): its transpose is CSR
    rt = sp.csc_matrix((ranks, x.indices, x.indptr), shape=x.shape).T.tocsr()
    nzt = sp.csc_matrix((np.ones(len(ranks)), x.indices, x.indptr), shape=x.shape).T.tocsr()
    zero_rank = (zeros + 1.0) / 2.0
    n = len(labels)
    n_groups = len(sizes)

    both = sp.vstack([rt, nzt]).tocsr()

    def rank_sums(lab2d, groups):
        out = np.empty((len(groups), m, lab2d.shape[1]))
        for k, g in enumerate(groups):
            prod = both @ (lab2d == g).astype(np.float64)
            out[k] = prod[:m] + (sizes[g] - prod[m:]) * zero_rank[:, None]
        return out

    if n_groups == 2:
        n1, n2 = int(sizes[0]), int(sizes[1])
        mu = n1 * n2 / 2
        s = np.sqrt(n1 * n2 / 12 * ((n + 1) - tie_term / (n * (n - 1))))[:, None]

        def pfunc(lab2d):
            u1 = rank_sums(lab2d, [0])[0] - n1 * (n1 + 1) / 2.0
            u = np.maximum(u1, n1 * n2 - u1)
            with np.errstate(divide="ignore", invalid="ignore"):
                z = (u - mu - 0.5) / s
            return np.clip(special.ndtr(-z) * 2, 0.0, 1.0)
    else:
        ties = (1.0 - tie_term / (float(n) ** 3 - n))[:, None]

        def pfunc(lab2d):
            rs = rank_sums(lab2d, range(n_groups))
            ssbn = (rs * rs / sizes[:, None, None]).sum(axis=0)
            h = 12.0 / (n * (n + 1)) * ssbn - 3 * (n + 1)
            with np.errstate(divide="ignore", invalid="ignore"):
                h = np.where(ties > 0, h / ties, 0.0)
            return np.where(ties > 0, stats.chi2.sf(h, n_groups - 1), 1.0)

    raw = pfunc(labels[:, None])[:, 0]
    adjusted = _step_down_minp(raw, pfunc, labels, n_permutations, random_state,
                               _batch_size(batch_size, m), n_jobs=n_jobs, scheduler=scheduler)
    return raw, adjusted


def presence_pvalues(presence, labels):
    """Raw p-values of the presence test (Fisher for two groups, chi-square otherwise)."""
    labels = np.asarray(labels, dtype=np.int64)
    pt, sizes = _prepare(presence, labels)
    counts = _group_counts(pt, labels[:, None], len(sizes))
    if len(sizes) == 2:
        a = counts[0][:, 0]
        c = counts[1][:, 0]
        return fisher_exact_many(a, sizes[0] - a, c, sizes[1] - c)
    return chi2_presence(counts[:, :, 0], sizes)[1]


def bootstrap_significance(presence, labels, direction, *,
                           n_bootstrap=_CONTRAST["n_bootstrap"],
                           alpha=_CONTRAST["alpha"],
                           random_state=DEFAULT_CONFIG["seed"], batch_size=None):
    """Share of stratified bootstrap resamples in which each pattern is significant.

    Parameters
    ----------
    presence : sparse matrix, shape (n_sequences, n_patterns)
    labels : array_like of int, shape (n_sequences,)
        Group index ``0 .. k-1`` of each sequence.
    direction : ndarray of int, shape (n_patterns,)
        Observed direction: for two groups the sign of the support difference
        (group 0 minus group 1); for more groups the index of the group with the
        highest support. A pattern with direction 0 (two groups, no difference)
        scores 0.
    n_bootstrap : int
        Number of resamples ``R``. Each draws, within every group, as many sequences
        as the group has, with replacement (stratified bootstrap).
    alpha : float
        Nominal (uncorrected) level.
    random_state : int
        Resamples come from ``rng = numpy.random.default_rng([random_state, 1])``: for
        resample ``r = 0 .. R-1`` and group ``g = 0 .. k-1`` in turn,
        ``rng.choice(members_g, size=n_g, replace=True)`` (independent of batching).

    Returns
    -------
    ndarray of float, shape (n_patterns,)
        Fraction of resamples in which the raw presence test (Fisher for two groups,
        chi-square otherwise) has p <= ``alpha`` *and* the direction matches.
    """
    n_resamples = check_int(n_bootstrap, "n_bootstrap", "contrast", minimum=1)
    labels = np.asarray(labels, dtype=np.int64)
    direction = np.asarray(direction, dtype=np.int64)
    pt, sizes = _prepare(presence, labels)
    n_groups = len(sizes)
    m = pt.shape[0]
    hits = np.zeros(m, dtype=np.int64)
    if m == 0:
        return np.zeros(0)
    members = [np.flatnonzero(labels == g) for g in range(n_groups)]
    rng = np.random.default_rng([random_state, 1])
    batch = _batch_size(batch_size, m)
    n = len(labels)
    done = 0
    while done < n_resamples:
        nb = min(batch, n_resamples - done)
        w = np.zeros((n_groups, n, nb), dtype=pt.dtype)
        for b in range(nb):
            for g, mem in enumerate(members):
                w[g, :, b] = np.bincount(rng.choice(mem, size=len(mem), replace=True),
                                         minlength=n)
        counts = np.stack([np.rint(pt @ w[g]) for g in range(n_groups)])
        frac = counts / sizes[:, None, None]
        if n_groups == 2:
            a, c = counts[0], counts[1]
            p = fisher_exact_many(a.astype(np.int64), sizes[0] - a.astype(np.int64),
                                  c.astype(np.int64), sizes[1] - c.astype(np.int64))
            same = np.sign(frac[0] - frac[1]).astype(np.int64) == direction[:, None]
            same &= direction[:, None] != 0
        else:
            p = chi2_presence(counts, sizes)[1]
            same = np.argmax(frac, axis=0) == direction[:, None]
        hits += ((p <= alpha) & same).sum(axis=1)
        done += nb
    return hits / n_resamples


# --------------------------------------------------------------------- helpers
def _step_down_minp(raw, pfunc, labels, n_permutations, seed, batch, n_jobs=1, scheduler=None):
    """Westfall-Young algorithm 2.8 given ``pfunc(permuted labels (n, nb)) -> (m, nb)``."""
    m = len(raw)
    order = np.argsort(raw, kind="stable")
    threshold = raw[order][:, None] * (1.0 + FISHER_RTOL)
    rng = np.random.default_rng(seed)
    if (n_jobs is None or n_jobs == 1) and not scheduler:
        exceed = _exceed_counts((pfunc, labels, rng.bit_generator.state, n_permutations, batch,
                                 order, threshold, True))
    else:
        tasks = []
        for start, stop in _chunks(n_permutations, n_jobs):
            tasks.append((pfunc, labels, rng.bit_generator.state, stop - start, batch, order,
                          threshold, False))
            for _ in range(stop - start):   # advance exactly as the chunk will
                rng.permutation(labels)
        exceed = np.sum(parallel_map(_exceed_counts, tasks, n_jobs=n_jobs, scheduler=scheduler),
                        axis=0)
    adj_sorted = np.maximum.accumulate((exceed + 1.0) / (n_permutations + 1.0))
    adjusted = np.empty(m)
    adjusted[order] = np.minimum(adj_sorted, 1.0)
    return adjusted


def _exceed_counts(task):
    """Per sorted pattern, how many of ``count`` permutations have ``q*(j) <= p(j)``."""
    pfunc, labels, state, count, batch, order, threshold, show = task
    rng = np.random.default_rng()
    rng.bit_generator.state = state
    exceed = np.zeros(len(order), dtype=np.int64)
    done = 0
    bar = progress(total=count, desc="permutations", unit="perm") if show else None
    while done < count:
        nb = min(batch, count - done)
        perm = np.stack([rng.permutation(labels) for _ in range(nb)], axis=1)
        p_b = pfunc(perm)[order]
        q_b = np.minimum.accumulate(p_b[::-1], axis=0)[::-1]
        exceed += (q_b <= threshold).sum(axis=1)
        done += nb
        if bar is not None:
            bar.update(nb)
    if bar is not None:
        bar.close()
    return exceed


def _chunks(n, jobs):
    """Contiguous ranges covering ``0 .. n-1``: two per worker (for balance)."""
    workers = n_workers(jobs)
    k = max(1, min(n, 2 * workers))
    edges = np.linspace(0, n, k + 1).round().astype(np.int64)
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _prepare(presence, labels):
    presence = sp.csr_matrix(presence)
    if presence.shape[0] != len(labels):
        raise ParameterError(
            f"presence has {presence.shape[0]} rows but labels has {len(labels)} entries.")
    if len(labels) and (labels.min() < 0):
        raise ParameterError("labels must be group indices >= 0; drop ungrouped sequences first.")
    n_groups = int(labels.max()) + 1 if len(labels) else 0
    sizes = np.bincount(labels, minlength=n_groups).astype(np.int64)
    if n_groups < 2 or np.any(sizes == 0):
        raise ParameterError("Permutation and bootstrap tests need at least two non-empty groups.")
    # float32 products count exactly up to 2**24 sequences; beyond that use float64
    dtype = np.float32 if presence.shape[0] < 2 ** 24 else np.float64
    pt = (presence > 0).astype(dtype).T.tocsr()
    return pt, sizes


def _group_counts(pt, labels2d, n_groups):
    """Counts of present sequences per group: array (n_groups, n_patterns, n_columns)."""
    total = np.asarray(pt.sum(axis=1)).ravel()
    out = np.empty((n_groups, pt.shape[0], labels2d.shape[1]))
    rest = np.zeros((pt.shape[0], labels2d.shape[1]))
    for g in range(n_groups - 1):
        ind = (labels2d == g).astype(pt.dtype)
        out[g] = np.rint(pt @ ind)
        rest += out[g]
    out[n_groups - 1] = total[:, None] - rest
    return out


def _pvalue_function(pt, sizes):
    """p-values from group counts: Fisher table lookup (2 groups) or chi-square."""
    if len(sizes) > 2:
        return lambda counts: chi2_presence(counts, sizes)[1]
    n1, n = int(sizes[0]), int(sizes.sum())
    total = np.rint(np.asarray(pt.sum(axis=1)).ravel()).astype(np.int64)
    uniq, inverse = np.unique(total, return_inverse=True)
    lf = _log_factorials(n)
    pieces, starts, offsets = [], np.zeros(len(uniq), dtype=np.int64), 0
    for u, k in enumerate(uniq):
        lo, table = fisher_table(n, n1, int(k), lf)
        pieces.append(table)
        starts[u] = offsets - lo
        offsets += len(table)
    flat = np.concatenate(pieces)
    base = starts[inverse.ravel()]

    def lookup(counts):
        return flat[base[:, None] + counts[0].astype(np.int64)]

    return lookup


def _batch_size(batch_size, m):
    if batch_size is not None:
        return check_int(batch_size, "batch_size", "contrast", minimum=1)
    return int(max(1, min(1000, _BATCH_ENTRIES // max(m, 1))))
