"""Pause bins: edges that survive real clocks, and their ranges in words.

Edges of the ``quantile`` strategy
----------------------------------
Gaps are whole microseconds (:func:`seqmine.inputs.clock.to_microseconds`). Each
learner weighs the same: a gap of a learner with ``m`` gaps has weight ``1/m``, so one
learner with 100,000 events cannot set everyone's edges. Edges are chosen among the
gap values that occur (the values the clock can express), one at a time:

1. the share of the weight still to be split is divided equally among the bins still
   to be made, which gives the target share below the next edge;
2. the next edge is one of two observed gaps: the shortest with at least the target
   share of the weight strictly below it, or the one just before it, whichever has
   the share below it nearer to the target (the former on a tie, within 10^-9); it must lie above
   the previous edge;
3. when no observed gap is left above the previous edge, there are fewer bins.

So edges are strictly increasing and positive (an edge always has some gap below it),
no bin is empty on the fitted data, and a value that holds much of the weight (67 % of
gaps exactly 1 s on a one-second clock) stays whole in one bin while the rest is still
split evenly. The two candidates of step 2 are ``x = np.quantile(gaps, target,
weights=w, method="inverted_cdf")`` and the observed gap just above ``x``; with
continuous gaps and equal learners step 1 gives the usual tertiles.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .sequences import PAUSE_PREFIX

__all__ = ["pause_labels", "learner_weighted_edges", "format_seconds", "pause_range_text",
           "pause_ranges", "describe_token"]

_LABELS = {
    1: ["any"],
    2: ["short", "long"],
    3: ["short", "medium", "long"],
    4: ["short", "medium", "long", "very_long"],
    5: ["very_short", "short", "medium", "long", "very_long"],
}
_TOL = 1e-9


def pause_labels(n_bins):
    """Readable names of ``n_bins`` pause bins, shortest first.

    Examples
    --------
    >>> pause_labels(3)
    ['short', 'medium', 'long']
    """
    return list(_LABELS.get(n_bins, [f"p{i + 1}" for i in range(n_bins)]))


def learner_weighted_edges(gaps, learners, n_bins):
    """Edges (same unit as ``gaps``) of at most ``n_bins`` bins; see the module notes.

    Parameters
    ----------
    gaps : array of int
        Gaps within sequences (whole microseconds).
    learners : array
        Learner (any hashable codes) of each gap.
    n_bins : int

    Returns
    -------
    ndarray of int64
        Strictly increasing positive edges; fewer than ``n_bins - 1`` when the gaps
        take too few distinct values.

    Examples
    --------
    >>> learner_weighted_edges(np.array([1, 2, 3, 4, 5, 6]), np.zeros(6), 3).tolist()
    [3, 5]
    >>> # one-second clock, most gaps 1 s: the atom stays whole, the rest is split
    >>> g = np.array([1] * 6 + [2, 5, 9])
    >>> learner_weighted_edges(g, np.zeros(9), 3).tolist()
    [2, 9]
    >>> learner_weighted_edges(np.zeros(5, dtype=int), np.zeros(5), 3).tolist()
    []
    """
    gaps = np.asarray(gaps, dtype=np.int64)
    if len(gaps) == 0 or n_bins < 2:
        return np.zeros(0, dtype=np.int64)
    codes = pd.factorize(np.asarray(learners, dtype=object))[0]  # hashing: no object sort
    per = np.bincount(codes)
    weight = 1.0 / per[codes]
    values, inverse = np.unique(gaps, return_inverse=True)
    mass = np.bincount(inverse.ravel(), weights=weight)
    mass /= mass.sum()
    below = np.concatenate([[0.0], np.cumsum(mass)[:-1]])  # weight strictly below each value
    edges = []
    done = 0.0  # weight below the previous edge
    start = 1  # the smallest value cannot be an edge (nothing lies below it)
    m = len(values)
    for k in range(1, n_bins):
        target = done + (1.0 - done) / (n_bins - k + 1)
        u = int(np.searchsorted(below, target - _TOL, side="left"))
        cands = [j for j in (u - 1, u) if start <= j < m]
        if not cands:
            if start >= m:
                break
            cands = [m - 1]
        j = cands[-1]
        if len(cands) == 2 and target - below[cands[0]] < below[cands[1]] - target - _TOL:
            j = cands[0]
        edges.append(values[j])
        done = below[j]
        start = j + 1
    return np.asarray(edges, dtype=np.int64)


def format_seconds(seconds):
    """Seconds as short text: ``"0.25 s"``, ``"5 s"``, ``"1,800 s"``.

    Examples
    --------
    >>> format_seconds(5.0), format_seconds(0.25), format_seconds(86400)
    ('5 s', '0.25 s', '86,400 s')
    """
    s = float(seconds)
    if not math.isfinite(s):
        return "–"
    if s == int(s):
        return f"{int(s):,} s"
    return f"{s:,.6f}".rstrip("0").rstrip(".") + " s"


def pause_range_text(low, high):
    """Words for the bin ``[low, high)`` in seconds (``high`` may be inf).

    Examples
    --------
    >>> pause_range_text(0, 5), pause_range_text(5, 17), pause_range_text(17, math.inf)
    ('under 5 s', '5 s to under 17 s', '17 s or more')
    """
    if not math.isfinite(high):
        return f"{format_seconds(low)} or more" if low > 0 else "any length"
    if low <= 0:
        return f"under {format_seconds(high)}"
    return f"{format_seconds(low)} to under {format_seconds(high)}"


def pause_ranges(encoding):
    """``{pause token: range text}`` of an encoding (``SequenceDB.encoding``, the
    ``encoding`` block of a detectors file, or ``{"pause": {...}}``).

    Examples
    --------
    >>> pause_ranges({"pause": {"edges": [5.0, 17.0], "labels": ["short", "medium", "long"]}})
    {'pause:short': 'under 5 s', 'pause:medium': '5 s to under 17 s', 'pause:long': '17 s or more'}
    """
    # read from files a user may have edited: anything malformed gives no ranges
    pause = encoding.get("pause") if isinstance(encoding, dict) else None
    if not isinstance(pause, dict):
        return {}
    edges, labels = pause.get("edges") or [], pause.get("labels") or []
    try:
        edges = [float(e) for e in edges]
        labels = [str(x) for x in labels]
    except (TypeError, ValueError):
        return {}
    if len(labels) != len(edges) + 1 or not all(map(math.isfinite, edges)):
        return {}
    bounds = [0.0, *edges, math.inf]
    return {PAUSE_PREFIX + lab: pause_range_text(bounds[i], bounds[i + 1])
            for i, lab in enumerate(labels)}


def describe_token(token, ranges):
    """``token`` with its range beside it when it is a pause token in ``ranges``.

    Examples
    --------
    >>> describe_token("pause:long", {"pause:long": "17 s or more"})
    'pause:long (17 s or more)'
    >>> describe_token("reset", {})
    'reset'
    """
    text = ranges.get(token) if ranges else None
    return f"{token} ({text})" if text else token
