"""Redundancy pruning: patterns whose supporting sequences nearly coincide with a kept one."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .._util.checks import check_fraction

__all__ = ["prune_redundant", "jaccard_pairs"]

_BLOCK = 256


def prune_redundant(presence, order, threshold=0.9):
    """Greedy pruning of near-duplicate patterns by their supporting-sequence sets.

    Parameters
    ----------
    presence : sparse matrix, shape (n_sequences, n_patterns)
        Non-zero where the pattern occurs in the sequence.
    order : array_like of int
        Pattern indices by priority (first = preferred).
    threshold : float in (0, 1]
        Jaccard index ``|S_i & S_j| / |S_i | S_j|`` at or above which two patterns'
        supporting sets count as nearly the same.

    Returns
    -------
    ndarray of int, shape (n_patterns,)
        For a redundant pattern the index of the kept pattern it duplicates (the
        earliest in ``order`` among its kept neighbours), else -1.

    Notes
    -----
    Patterns are visited in ``order``; a pattern is redundant when a kept pattern
    visited before it has Jaccard >= ``threshold`` with it, otherwise it is kept.
    Patterns with no supporting sequence are never redundant.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> pres = sp.csr_matrix(np.array([[1, 1, 0], [1, 1, 1], [1, 1, 1], [0, 0, 1]]))
    >>> prune_redundant(pres, [1, 0, 2], 0.9).tolist()
    [1, -1, -1]
    """
    threshold = check_fraction(threshold, "redundancy", "prune_redundant")
    presence = sp.csc_matrix(presence)
    m = presence.shape[1]
    order = np.asarray(order, dtype=np.int64)
    rank = np.empty(m, dtype=np.int64)
    rank[order] = np.arange(m)
    i, j = jaccard_pairs(presence, threshold)
    rep = np.full(m, -1, dtype=np.int64)
    if len(i) == 0:
        return rep
    # neighbours of each pattern that come earlier in priority
    earlier = rank[i] < rank[j]
    i, j = i[earlier], j[earlier]
    srt = np.lexsort((rank[i], j))
    i, j = i[srt], j[srt]
    starts = np.searchsorted(j, np.arange(m + 1))
    kept = np.ones(m, dtype=bool)
    for pat in order:
        nb = i[starts[pat]: starts[pat + 1]]
        if len(nb):
            alive = nb[kept[nb]]
            if len(alive):
                kept[pat] = False
                rep[pat] = alive[0]
    return rep


def jaccard_pairs(presence, threshold):
    """All pairs ``(i, j)``, ``i != j``, whose supporting sets have Jaccard >= threshold.

    Computed blockwise with sparse-times-dense products, comparing each pattern only
    with patterns whose support size lies within ``[t * K, K / t]`` (a necessary
    condition for Jaccard >= t).
    """
    presence = (sp.csc_matrix(presence) > 0).astype(np.float32).tocsc()
    m = presence.shape[1]
    k = np.asarray(presence.sum(axis=0)).ravel()
    by_k = np.argsort(k, kind="stable")
    ks = k[by_k]
    pt = presence.T.tocsr()
    out_i, out_j = [], []
    for s in range(0, m, _BLOCK):
        block = by_k[s: s + _BLOCK]
        kb = k[block]
        if kb.max() == 0:
            continue
        lo = np.searchsorted(ks, threshold * kb[kb > 0].min() - 1e-9, side="left")
        hi = np.searchsorted(ks, kb.max() / threshold + 1e-9, side="right")
        cand = by_k[lo:hi]
        cand = cand[k[cand] > 0]
        if len(cand) == 0:
            continue
        dense = presence[:, block].toarray()
        inter = np.asarray(pt[cand] @ dense)
        union = k[cand][:, None] + kb[None, :] - inter
        with np.errstate(divide="ignore", invalid="ignore"):
            jac = np.where(union > 0, inter / union, 0.0)
        ci, bj = np.nonzero(jac >= threshold - 1e-12)
        gi, gj = cand[ci], block[bj]
        keep = gi != gj
        out_i.append(gi[keep])
        out_j.append(gj[keep])
    if not out_i:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(out_i).astype(np.int64), np.concatenate(out_j).astype(np.int64)
