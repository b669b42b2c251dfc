"""Vectorised tests and effect sizes for many patterns at once (Fisher, Mann-Whitney, ...)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy import special, stats

__all__ = [
    "fisher_exact_many",
    "mannwhitney_sparse",
    "kruskal_sparse",
    "chi2_presence",
    "odds_ratio_haldane",
    "cohens_h",
    "growth_rate",
    "FISHER_RTOL",
]

#: Relative tolerance of the two-sided Fisher rule: outcomes whose probability is at
#: most ``pmf(observed) * (1 + FISHER_RTOL)`` count as "as or more extreme". R's
#: ``fisher.test`` uses the same 1e-7; scipy uses 1e-14 on more exact pmf values.
#: Our pmf comes from log-factorials (relative error ~1e-11 for n ~ 10^4), so a
#: looser tolerance keeps mathematically tied outcomes (mirror images in symmetric
#: tables) tied.
FISHER_RTOL = 1e-7


def fisher_exact_many(a, b, c, d):
    """Two-sided Fisher exact test p-values of many 2x2 tables ``[[a, b], [c, d]]``.

    Parameters
    ----------
    a, b, c, d : array_like of int
        Cell counts, broadcast to a common shape.

    Returns
    -------
    ndarray of float
        p-values (same shape). Tables with an empty row or column get p = 1.

    Notes
    -----
    Conditioning on the margins, ``a`` follows the hypergeometric law with
    population ``N = a+b+c+d``, ``n1 = a+b`` draws and ``K = a+c`` successes. The
    two-sided p-value sums the probabilities of every outcome no more likely than the
    observed one (the rule of ``scipy.stats.fisher_exact`` and R's ``fisher.test``),
    with relative tolerance :data:`FISHER_RTOL`. Tables sharing ``(N, n1, K)`` share
    one distribution, computed once from log-factorials, sorted and cumulated; each
    table is then a binary search.

    Examples
    --------
    Fisher's tea-tasting table (Fisher 1935): two-sided p = 17/35.

    >>> float(fisher_exact_many(3, 1, 1, 3).round(6))
    0.485714
    """
    a, b, c, d = np.broadcast_arrays(*(np.asarray(x, dtype=np.int64) for x in (a, b, c, d)))
    shape = a.shape
    a, b, c, d = (x.ravel() for x in (a, b, c, d))
    n1 = a + b
    k = a + c
    n = n1 + c + d
    out = np.ones(len(a))
    if len(a) == 0:
        return out.reshape(shape)
    lf = _log_factorials(int(n.max()))
    keys = np.stack([n, n1, k], axis=1)
    uniq, inverse = np.unique(keys, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    order = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[order], np.arange(len(uniq) + 1))
    for u, (nn, nr, kk) in enumerate(uniq):
        idx = order[bounds[u]: bounds[u + 1]]
        lo, table = fisher_table(int(nn), int(nr), int(kk), lf)
        out[idx] = table[a[idx] - lo]
    return out.reshape(shape)


def fisher_table(n, n1, k, lf=None):
    """Two-sided Fisher p-value of every possible top-left count for fixed margins.

    Returns ``(lo, pvals)``: ``pvals[x - lo]`` is the p-value when the top-left cell
    equals ``x``, for ``lo <= x <= min(k, n1)``.
    """
    if lf is None:
        lf = _log_factorials(n)
    lo = max(0, k - (n - n1))
    hi = min(k, n1)
    x = np.arange(lo, hi + 1)
    logp = (lf[k] - lf[x] - lf[k - x] + lf[n - k] - lf[n1 - x] - lf[n - k - n1 + x]
            - lf[n] + lf[n1] + lf[n - n1])
    pmf = np.exp(logp - logp.max())
    pmf /= pmf.sum()
    srt = np.sort(pmf)
    cum = np.cumsum(srt)
    pos = np.searchsorted(srt, pmf * (1.0 + FISHER_RTOL), side="right")
    return lo, np.minimum(cum[pos - 1], 1.0)


def mannwhitney_sparse(x, first):
    """Two-sided Mann-Whitney U test of every column of a sparse non-negative matrix.

    Parameters
    ----------
    x : sparse matrix, shape (n_samples, n_columns)
        Non-negative values (e.g. rates); absent entries are zeros.
    first : array_like of bool, shape (n_samples,)
        True for the rows of the first sample, False for the second.

    Returns
    -------
    u1 : ndarray of float
        U statistic of the first sample (as ``scipy.stats.mannwhitneyu`` returns).
    pvalue : ndarray of float
        Two-sided p-values, equal to ``scipy.stats.mannwhitneyu(x1, x2)`` with its
        default ``method="auto"``: the normal approximation with tie and continuity
        correction, or the exact distribution when a sample has at most 8 values
        and the column has no ties.

    Examples
    --------
    The worked example of Shier (2004), also in the scipy documentation: U = 17,
    exact p = 0.1111.

    >>> import scipy.sparse as sp
    >>> v = np.array([[19, 22, 16, 29, 24, 20, 11, 17, 12]], float).T
    >>> u, p = mannwhitney_sparse(sp.csc_matrix(v), [True] * 5 + [False] * 4)
    >>> float(u[0]), float(p[0].round(4))
    (17.0, 0.1111)
    """
    first = np.asarray(first, dtype=bool)
    x = sp.csc_matrix(x, dtype=np.float64, copy=True)
    n1 = int(first.sum())
    n2 = int(len(first) - n1)
    ranks, zeros, tie_term = _sparse_ranks(x)
    n_cols = x.shape[1]
    rows = x.indices
    cols = np.repeat(np.arange(n_cols), np.diff(x.indptr))
    in1 = first[rows]
    nz1 = np.bincount(cols[in1], minlength=n_cols)
    r1 = (n1 - nz1) * (zeros + 1) / 2.0 + np.bincount(cols[in1], weights=ranks[in1],
                                                      minlength=n_cols)
    u1 = r1 - n1 * (n1 + 1) / 2.0
    u2 = n1 * n2 - u1
    u = np.maximum(u1, u2)
    # normal approximation exactly as scipy.stats.mannwhitneyu computes it
    mu = n1 * n2 / 2
    n = n1 + n2
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.sqrt(n1 * n2 / 12 * ((n + 1) - tie_term / (n * (n - 1))))
        z = (u - mu - 0.5) / s
    p = np.clip(special.ndtr(-z) * 2, 0.0, 1.0)
    if not (n1 > 8 and n2 > 8):
        exact = np.flatnonzero(tie_term == 0)
        if len(exact):
            dense = x[:, exact].toarray()
            res = stats.mannwhitneyu(dense[first], dense[~first], axis=0, method="exact")
            p[exact] = res.pvalue
    return u1, p


def kruskal_sparse(x, labels, n_groups):
    """Kruskal-Wallis H test of every column of a sparse non-negative matrix.

    Parameters
    ----------
    x : sparse matrix, shape (n_samples, n_columns)
    labels : array_like of int, shape (n_samples,)
        Group index ``0 .. n_groups - 1`` of each row.
    n_groups : int

    Returns
    -------
    h : ndarray of float
        Tie-corrected H statistic (``scipy.stats.kruskal``); 0 when all values of a
        column are equal.
    pvalue : ndarray of float
        Chi-square(``n_groups - 1``) upper tail; 1.0 when all values are equal (scipy
        returns NaN there).
    """
    labels = np.asarray(labels, dtype=np.int64)
    x = sp.csc_matrix(x, dtype=np.float64, copy=True)
    n = len(labels)
    n_cols = x.shape[1]
    ranks, zeros, tie_term = _sparse_ranks(x)
    cols = np.repeat(np.arange(n_cols), np.diff(x.indptr))
    lab = labels[x.indices]
    sizes = np.bincount(labels, minlength=n_groups).astype(np.float64)
    ssbn = np.zeros(n_cols)
    for g in range(n_groups):
        sel = lab == g
        nz = np.bincount(cols[sel], minlength=n_cols)
        rg = (sizes[g] - nz) * (zeros + 1) / 2.0 + np.bincount(cols[sel], weights=ranks[sel],
                                                               minlength=n_cols)
        if sizes[g] > 0:
            ssbn += rg * rg / sizes[g]
    ties = 1.0 - tie_term / (float(n) ** 3 - n)
    h = 12.0 / (n * (n + 1)) * ssbn - 3 * (n + 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.where(ties > 0, h / ties, 0.0)
    df = int((sizes > 0).sum()) - 1
    p = np.where(ties > 0, stats.chi2.sf(h, max(df, 1)), 1.0)
    return h, p


def chi2_presence(present, sizes):
    """Pearson chi-square test of a (groups x present/absent) table per pattern.

    Parameters
    ----------
    present : ndarray of int, shape (n_groups, ...)
        Number of sequences of each group containing the pattern.
    sizes : ndarray of int, shape (n_groups,)
        Number of sequences in each group.

    Returns
    -------
    chi2 : ndarray of float
        Pearson statistic without continuity correction (``scipy.stats.
        chi2_contingency(table, correction=False)``).
    pvalue : ndarray of float
        Upper tail of chi-square with ``n_groups - 1`` degrees of freedom; 1.0 when
        the pattern is in all or none of the sequences (no variation to test).
    """
    present = np.asarray(present, dtype=np.float64)
    sizes = np.asarray(sizes, dtype=np.float64).reshape((-1,) + (1,) * (present.ndim - 1))
    n = sizes.sum()
    k = present.sum(axis=0)
    e1 = sizes * k / n
    e0 = sizes * (n - k) / n
    with np.errstate(divide="ignore", invalid="ignore"):
        chi = ((present - e1) ** 2 / e1 + ((sizes - present) - e0) ** 2 / e0).sum(axis=0)
    degenerate = (k == 0) | (k == n)
    chi = np.where(degenerate, 0.0, chi)
    p = np.where(degenerate, 1.0, stats.chi2.sf(chi, sizes.size - 1))
    return chi, p


def odds_ratio_haldane(a, b, c, d):
    """Sample odds ratio ``(a d) / (b c)`` with the Haldane-Anscombe correction.

    When any of the four cells of a table is 0, 0.5 is added to all four cells of
    that table (Haldane 1956; Anscombe 1956), so the ratio is always finite and
    positive.

    Examples
    --------
    >>> float(odds_ratio_haldane(3, 1, 1, 3))
    9.0
    >>> float(odds_ratio_haldane(4, 0, 0, 4))  # (4.5 * 4.5) / (0.5 * 0.5)
    81.0
    """
    a, b, c, d = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (a, b, c, d)))
    zero = (a == 0) | (b == 0) | (c == 0) | (d == 0)
    add = np.where(zero, 0.5, 0.0)
    return (a + add) * (d + add) / ((b + add) * (c + add))


def cohens_h(p1, p2):
    """Cohen's h for two proportions: ``2 asin(sqrt p1) - 2 asin(sqrt p2)``.

    Examples
    --------
    >>> round(float(cohens_h(0.5, 0.5)), 6)
    0.0
    """
    p1 = np.asarray(p1, dtype=np.float64)
    p2 = np.asarray(p2, dtype=np.float64)
    return 2 * np.arcsin(np.sqrt(p1)) - 2 * np.arcsin(np.sqrt(p2))


def growth_rate(p1, p2):
    """Ratio of supports ``p1 / p2`` (inf when only ``p2`` is 0, NaN when both are).

    Examples
    --------
    >>> growth_rate([0.5, 0.2, 0.0], [0.25, 0.0, 0.0]).tolist()
    [2.0, inf, nan]
    """
    p1 = np.asarray(p1, dtype=np.float64)
    p2 = np.asarray(p2, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p2 > 0, p1 / np.where(p2 > 0, p2, 1.0),
                        np.where(p1 > 0, np.inf, np.nan))


# --------------------------------------------------------------------- helpers
def _log_factorials(n):
    """``log(k!)`` for ``k = 0 .. n``."""
    return special.gammaln(np.arange(n + 1, dtype=np.float64) + 1.0)


def _sparse_ranks(x):
    """Average ranks of the stored (non-zero) values of each column of ``x``.

    ``x`` is a CSC matrix of non-negative values. The implicit zeros of a column tie
    at the bottom. Returns ``(ranks, zeros, tie_term)``: ``ranks`` aligned with
    ``x.data`` (1-based ranks among the whole column, zeros included), ``zeros`` the
    number of zeros per column and ``tie_term`` the sum of ``t**3 - t`` over tie
    blocks per column (zeros included).
    """
    x.sum_duplicates()
    x.eliminate_zeros()
    n_rows, n_cols = x.shape
    counts = np.diff(x.indptr)
    zeros = (n_rows - counts).astype(np.float64)
    tie_term = zeros ** 3 - zeros
    nnz = len(x.data)
    ranks = np.zeros(nnz)
    if nnz == 0:
        return ranks, zeros, tie_term
    # sorting by (column, value) keeps each column's block where CSC has it, so the
    # column of sorted entry k is still cols[k]
    cols = np.repeat(np.arange(n_cols, dtype=np.int32), counts)
    order = np.lexsort((x.data, cols))
    v = x.data[order]
    new = np.ones(nnz, dtype=bool)
    new[1:] = (v[1:] != v[:-1]) | (cols[1:] != cols[:-1])
    del v
    starts = np.flatnonzero(new)
    block = np.cumsum(new, dtype=np.int64) - 1
    del new
    c0 = cols[starts]
    size = np.diff(np.append(starts, nnz)).astype(np.float64)
    first = (starts - x.indptr[c0]).astype(np.float64)
    avg = first + (size - 1) / 2.0 + 1.0 + zeros[c0]
    ranks[order] = avg[block]
    tie_term = tie_term + np.bincount(c0, weights=size ** 3 - size, minlength=n_cols)
    return ranks, zeros, tie_term
