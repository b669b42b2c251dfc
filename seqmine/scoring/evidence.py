"""What the data support for each pattern: order, presence beyond volume, or volume only.

:func:`evidence_tests` runs the volume-adjusted presence test and the order test of
:mod:`seqmine.scoring.adjusted` on a contrast's units; :func:`classify_evidence`
turns the corrected results into the ``evidence`` and ``favours`` columns.
"""

from __future__ import annotations

import numpy as np

from .adjusted import activity_strata, cell_counts, cmh_from_counts, order_tables

__all__ = ["evidence_tests", "classify_evidence", "direction_from_excess", "EVIDENCE_LEVELS"]

#: Values of the ``evidence`` column, strongest first ("" = none of them).
EVIDENCE_LEVELS = ("order", "presence", "volume")


def evidence_tests(presence, labels, n_groups, patterns, *, volume=None, token_counts=None,
                   lengths=None, n_strata=None):
    """Volume-adjusted presence test and order test of every pattern.

    The order test uses as many chance bins as there are activity strata
    (:func:`seqmine.scoring.adjusted.order_tables`).

    Parameters
    ----------
    presence : sparse matrix, shape (n_units, n_patterns)
        1 where the pattern occurs in the unit (learner or sequence).
    labels : ndarray of int, shape (n_units,)
        Group index ``0 .. n_groups - 1`` of each unit.
    n_groups : int
    patterns : list of tuple of int
        Token ids of each pattern (for the items the order test needs).
    volume : ndarray of float, shape (n_units,), optional
        Activity of each unit (events); None = neither test can be run (NaN columns).
    token_counts : sparse matrix, shape (n_units, n_vocab), optional
        Token counts per unit; None = no order test (NaN).
    lengths : ndarray, shape (n_units,), optional
        Tokens per unit (default: the row sums of ``token_counts``).
    n_strata : int, optional
        Activity strata (see :func:`seqmine.scoring.adjusted.activity_strata`).

    Returns
    -------
    dict
        ``p_volume``, ``p_order`` (NaN where not defined), ``dir_volume``,
        ``dir_order`` (favoured group index, -1 for none), ``strata`` (per unit, or
        None), ``n_strata``.
    """
    m = presence.shape[1]
    out = {"p_volume": np.full(m, np.nan), "p_order": np.full(m, np.nan),
           "dir_volume": np.full(m, -1, dtype=np.int64),
           "dir_order": np.full(m, -1, dtype=np.int64), "strata": None, "n_strata": 0}
    if volume is None or m == 0:
        return out
    strata = activity_strata(volume, n_strata)
    n_s = int(strata.max()) + 1 if len(strata) else 0
    out["strata"], out["n_strata"] = strata, n_s
    x = cell_counts(presence, labels, strata, n_groups, n_s)            # (G, S, m)
    sizes = np.bincount(labels * n_s + strata, minlength=n_groups * n_s).reshape(n_groups, n_s)
    p, _, excess = cmh_from_counts(x, sizes)
    out["p_volume"] = p
    out["dir_volume"] = direction_from_excess(excess, sizes.sum(axis=1)[:, None])
    has = np.flatnonzero([len(p) >= 2 for p in patterns])
    if token_counts is None or len(has) == 0:
        return out
    if lengths is None:
        lengths = np.asarray(token_counts.sum(axis=1)).ravel()
    out["lengths"] = lengths
    ((xo, el),) = order_tables(presence[:, has], token_counts, lengths,
                               [patterns[i] for i in has], [(labels, n_groups)], n_s)
    po, _, exo = cmh_from_counts(xo, el)
    out["p_order"][has] = po
    out["dir_order"][has] = direction_from_excess(exo, el.sum(axis=1))
    return out


def direction_from_excess(excess, totals):
    """Favoured group per pattern from summed observed-minus-expected counts.

    Two groups: 0 when group 0's excess is positive, 1 when negative, -1 when 0.
    More groups: the group with the largest excess per unit (``excess / totals``).

    Examples
    --------
    >>> direction_from_excess(np.array([[2.0, -1.0, 0.0], [-2.0, 1.0, 0.0]]),
    ...                       np.array([[10], [10]])).tolist()
    [0, 1, -1]
    """
    excess = np.asarray(excess, dtype=np.float64)
    if excess.shape[0] == 2:
        return np.where(excess[0] > 1e-9, 0, np.where(excess[0] < -1e-9, 1, -1))
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(totals > 0, excess / np.where(totals > 0, totals, 1), -np.inf)
    best = np.argmax(rel, axis=0)
    return np.where(np.abs(excess).max(axis=0) > 1e-9, best, -1)


def classify_evidence(q_value, q_volume, q_order, dir_raw, dir_volume, dir_order, names,
                      alpha):
    """The ``evidence`` and ``favours`` columns.

    ``order`` when ``q_order <= alpha``; else ``presence`` when ``q_volume <= alpha``;
    else ``volume`` when ``q_value <= alpha`` (the difference is there before the
    volume adjustment only); else ``""``. ``favours`` names the group the named test
    favours (the raw support direction for ``volume``); empty without evidence.

    Examples
    --------
    >>> ev, fav = classify_evidence([0.01, 0.01, 0.01, 0.5], [0.01, 0.01, 0.5, 0.5],
    ...                             [0.01, 0.5, 0.5, np.nan], [0, 0, 1, 0], [0, 0, 1, 0],
    ...                             [1, 0, 1, -1], ["strong", "weak"], 0.05)
    >>> ev.tolist(), fav.tolist()
    (['order', 'presence', 'volume', ''], ['weak', 'strong', 'weak', ''])
    """
    def ok(q):
        q = np.asarray(q, dtype=np.float64)
        return np.where(np.isnan(q), False, q <= alpha)

    order, pres, raw = ok(q_order), ok(q_volume), ok(q_value)
    evidence = np.where(order, "order", np.where(pres, "presence", np.where(raw, "volume", "")))
    idx = np.where(order, dir_order, np.where(pres, dir_volume, np.where(raw, dir_raw, -1)))
    idx = np.asarray(idx, dtype=np.int64)
    labels = np.array(list(names) + [""], dtype=object)
    favours = np.where(idx >= 0, labels[np.where(idx >= 0, idx, len(names))], "")
    return evidence.astype(object), favours.astype(object)
