"""Presence adjusted for activity volume, and order beyond the items' presence.

Two questions the plain presence test cannot answer:

* **Volume.** A learner who does more has more chances to show any pattern. The
  *volume-adjusted* test compares the groups within strata of learners with about
  the same number of events (Cochran-Mantel-Haenszel over activity strata), so a
  pattern that is more common only because one group was more active does not pass.
* **Order.** A pattern ``a > b`` can differ because one group uses ``a`` and ``b`` more
  at all. The *order* test keeps only the units that contain every item of the
  pattern (with its multiplicity) and asks, within bins of how often the pattern
  would occur by chance given those items' counts and the unit's length, whether the
  groups differ in how often the items come in this order (and with the pattern's
  gap constraints).

Both tests are vectorised over all patterns: per-stratum counts come from one sparse
product (presence) or from batched array operations over units x patterns.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import scipy.sparse as sp
from scipy import special

from .._util.checks import check_int
from ..errors import ParameterError

__all__ = [
    "activity_strata",
    "cmh_from_counts",
    "cmh_moments",
    "cmh_statistic",
    "chi2_upper",
    "cell_counts",
    "CellCounter",
    "item_requirements",
    "order_tables",
    "chance_occurrences",
    "MAX_AUTO_STRATA",
    "UNITS_PER_STRATUM",
]

#: Automatic stratum count: about this many units per activity stratum ...
UNITS_PER_STRATUM = 10
#: ... but never more than this many strata (so per-stratum tables stay small).
MAX_AUTO_STRATA = 50

#: Entries (units x requirement sets) of one dense batch of the order test.
_BATCH_ENTRIES = 2_000_000


def activity_strata(volume, n_strata=None):
    """Stratum of each unit by its activity volume (quantile bins).

    Parameters
    ----------
    volume : array_like of float, shape (n_units,)
        Activity of each unit (events per learner, or sequence length).
    n_strata : int, optional
        Number of strata asked for. Default: ``n_units // 10`` (about ten units per
        stratum), at least 2 and at most :data:`MAX_AUTO_STRATA`.

    Returns
    -------
    ndarray of int64, shape (n_units,)
        Stratum index ``0 .. S-1`` (consecutive). The edges are the ``1/k, ...,
        (k-1)/k`` quantiles of ``volume`` (NumPy's linear interpolation); units equal to
        an edge go to the upper stratum, so tied volumes always share a stratum and
        fewer than ``n_strata`` strata may result.

    Examples
    --------
    >>> activity_strata([5, 1, 9, 3, 7, 3], n_strata=3).tolist()
    [1, 0, 2, 1, 2, 1]
    """
    v = np.asarray(volume, dtype=np.float64)
    n = len(v)
    if n_strata is None:
        n_strata = int(np.clip(n // UNITS_PER_STRATUM, 2, MAX_AUTO_STRATA))
    n_strata = check_int(n_strata, "n_volume_strata", "contrast", minimum=1)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    edges = np.unique(np.quantile(v, np.linspace(0.0, 1.0, n_strata + 1)[1:-1]))
    raw = np.searchsorted(edges, v, side="right")
    _, strata = np.unique(raw, return_inverse=True)
    return strata.ravel().astype(np.int64)


def cell_counts(matrix, labels, strata, n_groups, n_strata):
    """Column sums of ``matrix`` per (group, stratum) cell: array (G, S, n_columns).

    Rows with label -1 are left out. For a sparse 0/1 presence matrix one
    ``numpy.bincount`` over its stored entries does it (see :class:`CellCounter`).
    """
    return CellCounter(matrix).counts(labels, strata, n_groups, n_strata)


class CellCounter:
    """Sums of a sparse matrix's columns per cell of the rows, for many cell
    assignments: the stored entries are laid out once, each assignment then costs one
    gather and one ``numpy.bincount`` over them.

    Examples
    --------
    >>> c = CellCounter(sp.csr_matrix([[1, 0], [1, 1], [0, 1]]))
    >>> c.counts(np.array([0, 1, 1]), np.zeros(3, int), 2, 1)[:, 0].tolist()
    [[1.0, 0.0], [1.0, 2.0]]
    """

    def __init__(self, matrix):
        m = sp.csr_matrix(matrix)
        m.sum_duplicates()
        self.shape = m.shape
        # entries are stored row by row, so a row's cell is spread over them by repeat
        self.row_counts = np.diff(m.indptr)
        self.cols = m.indices.astype(np.int32 if m.shape[1] < 2 ** 31 else np.int64)
        self.weighted = not np.all(m.data == 1)
        self.data = m.data.astype(np.float64) if self.weighted else None
        self._width, self._base = None, None

    def counts(self, labels, strata, n_groups, n_strata):
        labels = np.asarray(labels, dtype=np.int64)
        width = n_groups * n_strata
        # rows without a label go to one spill cell per column, dropped below
        cell = np.where(labels >= 0, labels * n_strata + np.asarray(strata, dtype=np.int64),
                        width)
        if self._width != width:
            size = self.shape[1] * (width + 1)
            dtype = np.int32 if size < 2 ** 31 else np.int64
            self._width, self._base = width, self.cols.astype(dtype) * dtype(width + 1)
        flat = self._base + np.repeat(cell.astype(self._base.dtype), self.row_counts)
        out = np.bincount(flat, weights=self.data,
                          minlength=self.shape[1] * (width + 1)).astype(np.float64)
        out = out.reshape(self.shape[1], width + 1)[:, :width]
        return np.rint(out.reshape(self.shape[1], n_groups, n_strata).transpose(1, 2, 0))


def cmh_from_counts(present, sizes):
    """Cochran-Mantel-Haenszel test of a group x (present, absent) table per stratum.

    Parameters
    ----------
    present : array_like, shape (G, S, m)
        Units of group g in stratum s where each of m patterns is present.
    sizes : array_like, shape (G, S) or (G, S, m)
        Units of group g in stratum s (per pattern for the order test, where only
        units holding the pattern's items count).

    Returns
    -------
    pvalue : ndarray, shape (m,)
        Upper tail of chi-square with ``G - 1`` degrees of freedom (fewer when a group
        has no unit in any informative stratum: the rank of the covariance); 1.0 when
        no stratum has variation (the pattern is in all or none of its units, or every
        stratum holds one group only).
    statistic : ndarray, shape (m,)
    excess : ndarray, shape (G, m)
        Observed minus expected present count of each group, summed over strata
        (its sign tells which group the pattern is more common in, at equal activity).

    Notes
    -----
    Within stratum s, with present total ``t_s`` among ``N_s`` units and ``n_gs`` units
    in group g, the count ``o_gs`` has, given the margins, mean ``n_gs t_s / N_s`` and
    covariance ``t_s (N_s - t_s) / (N_s^2 (N_s - 1)) (N_s diag(n_s) - n_s n_s')``
    (multivariate hypergeometric). The statistic is ``(O - E)' V^-1 (O - E)`` over the
    first ``G - 1`` groups, with O, E and V summed over strata (Mantel & Haenszel
    1959; the general-association form of Landis, Heyman & Koch 1978). For two groups
    it is the classical ``(sum_s (a_s - E a_s))^2 / sum_s Var a_s``, without continuity
    correction (``statsmodels StratifiedTable.test_null_odds(correction=False)``).
    With one stratum it equals ``(N - 1) / N`` times Pearson's chi-square.

    Examples
    --------
    Two strata, pattern present in 8 of 10 and 3 of 10 units of group 0, 4 of 10
    and 1 of 10 of group 1:

    >>> p, stat, excess = cmh_from_counts([[[8], [3]], [[4], [1]]], [[10, 10], [10, 10]])
    >>> round(float(stat[0]), 4), round(float(excess[0, 0]), 2)
    (4.275, 3.0)
    """
    excess, cov = cmh_moments(present, sizes)
    stat, df = cmh_statistic(excess[:-1].T, cov)
    p = chi2_upper(stat, df)
    return np.clip(p, 0.0, 1.0), stat, excess


def cmh_moments(present, sizes):
    """Summed observed-minus-expected counts and their null covariance.

    Parameters are those of :func:`cmh_from_counts`. Returns ``excess`` (G, m) and
    ``cov`` (m, G-1, G-1), the covariance of the first ``G - 1`` groups' summed counts
    given every stratum's margins.
    """
    x = np.asarray(present, dtype=np.float64)
    if x.ndim != 3:
        raise ParameterError(f"present must have shape (groups, strata, patterns); got {x.shape}.")
    n = np.asarray(sizes, dtype=np.float64)
    if n.ndim == 2:
        n = n[:, :, None]
    n = np.broadcast_to(n, x.shape)
    d = x.shape[0] - 1
    big_n = n.sum(axis=0)                       # (S, m)
    t = x.sum(axis=0)                           # (S, m)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(big_n > 0, t / np.where(big_n > 0, big_n, 1.0), 0.0)
        k = np.where(big_n > 1, t * (big_n - t) / (big_n ** 2 * np.maximum(big_n - 1, 1.0)),
                     0.0)                       # (S, m)
    excess = (x - n * frac[None]).sum(axis=1)   # (G, m)
    if d == 1:                                  # two groups: one variance per pattern
        return excess, (k * n[0] * (big_n - n[0])).sum(axis=0)[:, None, None]
    ns = n[:d]                                  # (d, S, m)
    cov = -np.einsum("sm,ism,jsm->mij", k, ns, ns)
    diag = np.einsum("sm,sm,ism->mi", k, big_n, ns)
    cov[:, np.arange(d), np.arange(d)] += diag
    return excess, cov


def cmh_statistic(e, cov):
    """``e' cov^-1 e`` per pattern (``e`` (m, d) or (m, d, nb), ``cov`` (m, d, d)) and
    its degrees of freedom, the rank of ``cov`` (0 = no variation: statistic 0). The
    pseudo-inverse covers a singular covariance (a group absent from every
    informative stratum)."""
    e = np.asarray(e, dtype=np.float64)
    inv = _pinv(cov)
    if cov.shape[1] == 1:
        df = (cov[:, 0, 0] > 1e-12).astype(np.int64)
    else:
        df = np.linalg.matrix_rank(cov, hermitian=True) if len(cov) else np.zeros(0, int)
    if e.ndim == 3:                             # many label sets at once
        stat = np.einsum("mib,mij,mjb->mb", e, inv, e)
        df = df[:, None]
    else:
        stat = np.einsum("mi,mij,mj->m", e, inv, e)
    return np.where(df > 0, np.maximum(stat, 0.0), 0.0), df


def chi2_upper(stat, df):
    """Upper tail of chi-square with ``df`` degrees of freedom; 1.0 where df is 0.

    With one degree of freedom it is ``erfc(sqrt(stat / 2))`` (the same function,
    computed faster).

    Examples
    --------
    >>> from scipy import stats
    >>> bool(np.isclose(chi2_upper(np.array([3.84]), np.array([1]))[0],
    ...                 stats.chi2.sf(3.84, 1), rtol=1e-12))
    True
    """
    stat = np.asarray(stat, dtype=np.float64)
    df = np.broadcast_to(np.asarray(df), stat.shape)
    if df.size and np.all((df == 1) | (df == 0)):
        return np.where(df > 0, special.erfc(np.sqrt(np.maximum(stat, 0.0) / 2.0)), 1.0)
    return np.where(df > 0, special.chdtrc(np.maximum(df, 1), stat), 1.0)


def _pinv(cov):
    if cov.shape[1] == 1:
        v = cov[:, 0, 0]
        with np.errstate(divide="ignore"):
            return np.where(v > 1e-12, 1.0 / np.where(v > 1e-12, v, 1.0), 0.0)[:, None, None]
    if len(cov) == 0:
        return cov.copy()
    return np.linalg.pinv(cov, hermitian=True)


def item_requirements(patterns):
    """Which items (with multiplicity) each pattern needs, as shared requirement sets.

    Parameters
    ----------
    patterns : list of tuple of int

    Returns
    -------
    requirements : list of tuple of (token, count)
        Distinct requirement sets, each sorted by token.
    index : ndarray of int64, shape (n_patterns,)
        Requirement set of each pattern (``-1`` for patterns of length below 2,
        which have no order to test).

    Examples
    --------
    >>> reqs, idx = item_requirements([(3, 1), (1, 3), (2, 2, 2), (4,)])
    >>> reqs, idx.tolist()
    ([((1, 1), (3, 1)), ((2, 3),)], [0, 0, 1, -1])
    """
    seen = {}
    index = np.full(len(patterns), -1, dtype=np.int64)
    for i, p in enumerate(patterns):
        if len(p) < 2:
            continue
        key = tuple(sorted(Counter(int(t) for t in p).items()))
        index[i] = seen.setdefault(key, len(seen))
    return list(seen), index


def order_tables(presence, token_counts, lengths, patterns, labelings, n_bins, *,
                 batch_entries=_BATCH_ENTRIES):
    """Per-pattern tables of the order test: units holding every item, by chance bin.

    Parameters
    ----------
    presence : sparse matrix, shape (n_units, n_patterns)
    token_counts : sparse matrix, shape (n_units, n_vocab)
        How often each token occurs in each unit.
    lengths : array_like, shape (n_units,)
        Tokens per unit.
    patterns : list of tuple of int
        Token ids of each pattern; patterns shorter than 2 get empty tables.
    labelings : list of (labels, n_labels)
        Group index of each unit (``-1`` = left out) and the number of groups; several
        labelings (e.g. the halves of random splits) share one pass over the data.
    n_bins : int
        Chance bins per pattern.

    Returns
    -------
    list of (present, sizes)
        Per labeling, two arrays of shape (n_labels, n_bins, n_patterns): units of
        each label and bin that hold every item of the pattern (``sizes``), and
        those among them where the pattern occurs (``present``).

    Notes
    -----
    A unit *holds the items* of a pattern when it contains each of the pattern's
    tokens at least as often as the pattern does. Its *chance index* is the number of
    back-to-back occurrences the pattern would have if the unit's L tokens were put
    in random order: ``(L - k + 1) * prod_j (n_{p_j} - r_j) / prod_{j<k} (L - j)``, where
    ``n_t`` counts token t in the unit and ``r_j`` the earlier pattern positions with
    the same token as position j (an exact expectation for contiguous patterns, a
    monotone proxy under gap and pause rules). The holders of each pattern are cut
    into ``n_bins`` quantile bins of the chance index (ties share a bin:
    ``bin = floor(n_bins * #holders with a smaller index / #holders)``), so a group
    that simply has more copies of the items, or longer sequences, is compared with
    like units.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> tok = sp.csr_matrix([[1, 1, 0], [1, 1, 0], [2, 0, 1], [1, 1, 1]])
    >>> pres = sp.csr_matrix([[1], [0], [0], [1]])
    >>> [(x.ravel().tolist(), n.ravel().tolist()) for x, n in order_tables(
    ...     pres, tok, [2, 2, 3, 3], [(0, 1)], [(np.array([0, 1, 0, 1]), 2)], 1)]
    [([1.0, 1.0], [1.0, 2.0])]
    """
    presence = sp.csc_matrix(presence)
    n_units, m = presence.shape
    lengths = np.asarray(lengths, dtype=np.float64)
    n_bins = int(n_bins)
    outs = [(np.zeros((k, n_bins, m)), np.zeros((k, n_bins, m))) for _, k in labelings]
    reqs, req_of = item_requirements(patterns)
    if not reqs or n_units == 0:
        return outs
    chance = _Chance(token_counts, lengths, reqs)
    # one indicator column per (labelling, label); units without a label have none
    starts = np.cumsum([0] + [k for _, k in labelings])[:-1]
    rows, cols = [], []
    for (lab, _), start_l in zip(labelings, starts):
        lab = np.asarray(lab, dtype=np.int64)
        ok = np.flatnonzero(lab >= 0)
        rows.append(ok)
        cols.append(start_l + lab[ok])
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    indicator = sp.csr_matrix((np.ones(len(rows), dtype=np.float32), (rows, cols)),
                              shape=(n_units, int(sum(k for _, k in labelings))))
    pats_of_req = np.argsort(req_of, kind="stable")
    pats_of_req = pats_of_req[req_of[pats_of_req] >= 0]
    bounds = np.searchsorted(req_of[pats_of_req], np.arange(len(reqs) + 1))
    step = max(1, int(batch_entries) // max(n_units, 1))
    for start in range(0, len(reqs), step):
        stop = min(start + step, len(reqs))
        rb = stop - start
        holds, log_e = chance.log_index(start, stop)
        # rounded, so that mathematically equal indices computed along different
        # sums of logarithms tie (and share a bin)
        bins = _chance_bins(np.where(holds, np.round(log_e, 9), np.inf), holds, n_bins)
        pats = pats_of_req[bounds[start]: bounds[stop]]
        local = req_of[pats] - start
        # holders as a sparse units x (set, bin) matrix, present holders as units x
        # (pattern, bin): one sparse product with the labellings' indicator matrix
        # counts every labelling's cells at once
        h_unit, h_set = np.nonzero(holds)
        h_cols = h_set * n_bins + bins[h_unit, h_set]
        hmat = sp.csr_matrix((np.ones(len(h_unit), dtype=np.float32), (h_unit, h_cols)),
                             shape=(n_units, rb * n_bins))
        sub = presence[:, pats].tocoo()
        p_unit, p_pat = sub.row.astype(np.int64), sub.col.astype(np.int64)
        p_ok = holds[p_unit, local[p_pat]]
        p_unit, p_pat = p_unit[p_ok], p_pat[p_ok]
        p_cols = p_pat * n_bins + bins[p_unit, local[p_pat]]
        pmat = sp.csr_matrix((np.ones(len(p_unit), dtype=np.float32), (p_unit, p_cols)),
                             shape=(n_units, len(pats) * n_bins))
        ind_t = indicator.T.tocsr()
        sizes_all = np.rint((ind_t @ hmat).toarray()).reshape(-1, rb, n_bins)
        present_all = np.rint((ind_t @ pmat).toarray()).reshape(-1, len(pats), n_bins)
        for (_, k), start_l, (x_out, n_out) in zip(labelings, starts, outs):
            sizes = sizes_all[start_l: start_l + k]              # (k, rb, n_bins)
            n_out[:, :, pats] = np.moveaxis(sizes[:, local, :], 1, 2)
            x_out[:, :, pats] = np.moveaxis(present_all[start_l: start_l + k], 1, 2)
    return outs


def chance_occurrences(token_counts, lengths, patterns):
    """Chance index of each pattern in each unit (see :func:`order_tables`).

    Returns
    -------
    ndarray, shape (n_units, n_patterns)
        Expected back-to-back occurrences of the pattern if the unit's tokens were in
        random order; NaN where the unit lacks some item (or the pattern is shorter
        than 2).

    Examples
    --------
    Three tokens ``a a b``: of the 3 arrangements, ``a b a`` and ``a a b`` hold one
    ``a > b`` and ``b a a`` none, so 2/3 on average.

    >>> import scipy.sparse as sp
    >>> chance_occurrences(sp.csr_matrix([[2, 1]]), [3], [(0, 1)]).round(4).tolist()
    [[0.6667]]
    """
    n_units = token_counts.shape[0]
    reqs, req_of = item_requirements(patterns)
    out = np.full((n_units, len(patterns)), np.nan)
    if not reqs:
        return out
    holds, log_e = _Chance(token_counts, lengths, reqs).log_index(0, len(reqs))
    ok = req_of >= 0
    out[:, ok] = np.where(holds[:, req_of[ok]], np.exp(log_e[:, req_of[ok]]), np.nan)
    return out


class _Chance:
    """Log chance index of requirement sets, for batches of them."""

    def __init__(self, token_counts, lengths, reqs):
        counts = sp.csc_matrix(token_counts)
        n_units = counts.shape[0]
        lengths = np.asarray(lengths, dtype=np.float64)
        self.k_of = np.array([sum(c for _, c in r) for r in reqs], dtype=np.int64)
        # log falling factorial of each needed (token, count); -inf when the unit has
        # fewer copies; the last column is zero (padding)
        pairs = sorted({pair for req in reqs for pair in req})
        col_of = {pair: j for j, pair in enumerate(pairs)}
        self.logfall = np.zeros((n_units, len(pairs) + 1))
        for j, (tok, cnt) in enumerate(pairs):
            n_t = (counts[:, tok].toarray().ravel() if tok < counts.shape[1]
                   else np.zeros(n_units))
            self.logfall[:, j] = np.where(
                n_t >= cnt,
                special.gammaln(n_t + 1) - special.gammaln(np.maximum(n_t - cnt, 0) + 1),
                -np.inf)
        self.width = max(len(r) for r in reqs)
        self.cols = np.full((len(reqs), self.width), len(pairs), dtype=np.int64)
        for i, req in enumerate(reqs):
            self.cols[i, :len(req)] = [col_of[pair] for pair in req]
        ks = np.arange(int(self.k_of.max()) + 1)
        # log of L (L-1) ... (L-k+1) and of L - k + 1, per unit and k
        self.log_lfall = (special.gammaln(lengths[:, None] + 1)
                          - special.gammaln(np.maximum(lengths[:, None] - ks, 0) + 1))
        self.log_pos = np.log(np.maximum(lengths[:, None] - ks + 1, 1e-300))

    def log_index(self, start, stop):
        """(holds, log index) for requirement sets ``start .. stop - 1``: (n_units, k)."""
        log_e = self.logfall[:, self.cols[start:stop, 0]].copy()
        for j in range(1, self.width):
            log_e += self.logfall[:, self.cols[start:stop, j]]
        holds = np.isfinite(log_e)
        kb = self.k_of[start:stop]
        log_e += self.log_pos[:, kb] - self.log_lfall[:, kb]
        return holds, log_e


def _chance_bins(values, holds, n_bins):
    """Quantile bin of each holder within its column; ties share a bin.

    ``bin = floor(n_bins * #holders with a smaller value / #holders)``; non-holders
    carry ``inf`` and sort last. With ``q_j = ceil(j * #holders / n_bins)``, a value has
    at least ``q_j`` smaller ones exactly when it exceeds the ``q_j``-th smallest, so the
    bin is the number of these ``n_bins - 1`` thresholds it exceeds: one search of every
    value among its column's thresholds (columns kept apart by an offset).
    """
    n, k = values.shape
    srt = np.sort(values, axis=0)
    n_h = holds.sum(axis=0)
    j = np.arange(1, n_bins)[:, None]
    q = -((-j * n_h[None, :]) // n_bins)                # ceil(j * n_h / n_bins)
    thresholds = np.where(q > 0, srt[np.maximum(q - 1, 0), np.arange(k)[None, :]], np.inf)
    # finite stand-ins for inf, then one offset per column larger than any spread
    finite = np.isfinite(values)
    lo = values[finite].min() if finite.any() else 0.0
    hi = values[finite].max() if finite.any() else 0.0
    span = hi - lo + 2.0
    big = hi + 1.0
    offset = np.arange(k) * span
    keys = (np.where(np.isfinite(thresholds), thresholds, big) - lo + offset[None, :]).T.ravel()
    vals = np.where(finite, values, big) - lo + offset[None, :]
    pos = np.searchsorted(keys, vals.ravel(), side="left").reshape(n, k)
    return pos - np.arange(k)[None, :] * (n_bins - 1)
