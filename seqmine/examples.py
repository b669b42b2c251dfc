"""Short example excerpts of pattern occurrences, for people reading the report.

Each excerpt is a few events around one occurrence of a pattern in one learner's
sequence, with the matched tokens flagged and the pauses shown in seconds, so a
reader sees what the pattern looks like in the log.
"""

from __future__ import annotations

import numpy as np

__all__ = ["find_occurrence", "pattern_examples"]


def find_occurrence(seq, pattern, *, max_gap=None, max_window=None, skip_pauses=False,
                    is_pause=None):
    """Positions of the occurrence of ``pattern`` in ``seq`` that ends first.

    Same semantics as the miner (see :mod:`seqmine.patterns`); a depth-first search,
    meant for a handful of short look-ups (the report), not for bulk counting.

    Parameters
    ----------
    seq : sequence of int
    pattern : sequence of int
    max_gap, max_window, skip_pauses
        The matching constraints.
    is_pause : array of bool, optional
        Pause flag per token id (needed with ``skip_pauses``).

    Returns
    -------
    list of int or None

    Examples
    --------
    >>> find_occurrence([1, 2, 3, 1, 3], [1, 3], max_gap=0)
    [3, 4]
    >>> find_occurrence([1, 2, 3], [1, 3], max_gap=0) is None
    True
    """
    seq = list(seq)
    pattern = list(pattern)
    n, k = len(seq), len(pattern)
    pause = [bool(is_pause[t]) for t in seq] if (skip_pauses and is_pause is not None) else [False] * n
    cum = np.concatenate([[0], np.cumsum([0 if p else 1 for p in pause])])

    def gap(i, j):  # tokens strictly between i and j that count
        return (cum[j] - cum[i + 1]) if skip_pauses else (j - i - 1)

    def span(i, j):
        return (cum[j + 1] - cum[i]) if skip_pauses else (j - i + 1)

    best = None
    for end in range(n):
        if seq[end] != pattern[-1]:
            continue
        # search backwards for a chain ending at `end` (memoised: no exponential blow-up)
        memo = {}
        found = _chain(seq, pattern, k - 1, end, gap, span, max_gap, max_window, end, memo)
        if found is not None:
            best = found
            break
    return best


def _chain(seq, pattern, j, pos, gap, span, max_gap, max_window, end, memo):
    key = (j, pos)
    if key in memo:
        return memo[key]
    memo[key] = res = _chain_uncached(seq, pattern, j, pos, gap, span, max_gap, max_window,
                                      end, memo)
    return res


def _chain_uncached(seq, pattern, j, pos, gap, span, max_gap, max_window, end, memo):
    if j == 0:
        if max_window is not None and span(pos, end) > max_window:
            return None
        return [pos]
    for prev in range(pos - 1, -1, -1):
        if max_gap is not None and gap(prev, pos) > max_gap:
            break
        if max_window is not None and span(prev, end) > max_window:
            break
        if seq[prev] == pattern[j - 1]:
            rest = _chain(seq, pattern, j - 1, prev, gap, span, max_gap, max_window, end, memo)
            if rest is not None:
                return rest + [pos]
    return None


def pattern_examples(db, patternset, patterns, *, favours=None, n_examples=2, context=3,
                     seed=0):
    """Excerpts of occurrences of ``patterns`` for ``examples.json``.

    Parameters
    ----------
    db : SequenceDB
        The database the pattern set was counted on.
    patternset : PatternSet
        Gives the constraints and which sequences contain each pattern.
    patterns : list of str
        Readable pattern names (as in ``patterns.csv``) to find examples of.
    favours : dict, optional
        pattern -> group name; examples are drawn from that group when possible.
    n_examples : int
        Excerpts per pattern.
    context : int
        Tokens shown before and after the occurrence.
    seed : int
        Which containing sequences are shown is drawn with this seed.

    Returns
    -------
    dict
        ``{"patterns": {pattern: [{"learner", "group", "events": [{"time", "token",
        "pause", "matched"}]}]}}`` with ``time`` in seconds from the sequence's first
        event and ``pause`` the seconds until the next event (pause tokens only).
    """
    rng = np.random.default_rng(seed)
    c = patternset.constraints or {}
    max_gap, max_window = c.get("max_gap"), c.get("max_window")
    skip = bool(c.get("skip_pauses", False))
    index = {name: i for i, name in enumerate(patternset.names)}
    counts = patternset.counts.tocsc()
    out = {}
    for name in patterns:
        if name not in index:
            continue
        j = index[name]
        rows = counts.indices[counts.indptr[j]:counts.indptr[j + 1]]
        rows = np.sort(rows)
        want = (favours or {}).get(name)
        if want and want in db.group_names:
            g = db.group_names.index(want)
            preferred = rows[db.groups[rows] == g]
            rows = preferred if len(preferred) else rows
        if len(rows) == 0:
            continue
        chosen = rng.choice(rows, size=min(n_examples, len(rows)), replace=False)
        excerpts = []
        for s in sorted(int(x) for x in chosen):
            seq = db.sequence(s)
            occ = find_occurrence(seq, patternset.patterns[j], max_gap=max_gap,
                                  max_window=max_window, skip_pauses=skip, is_pause=db.is_pause)
            if occ is None:  # pragma: no cover - counts say it occurs
                continue
            lo, hi = max(0, occ[0] - context), min(len(seq), occ[-1] + context + 1)
            base = db.offsets[s]
            t0 = db.times[base]
            matched = set(occ)
            events = []
            for p in range(lo, hi):
                tok = int(seq[p])
                ev = {"time": round(float(db.times[base + p] - t0), 3),
                      "token": db.vocab[tok], "matched": p in matched}
                if db.is_pause[tok] and p + 1 < len(seq):
                    ev["pause"] = round(float(db.times[base + p + 1] - db.times[base + p]), 3)
                events.append(ev)
            grp = int(db.groups[s])
            excerpts.append({"learner": str(db.learners[s]),
                             "group": db.group_names[grp] if grp >= 0 else "",
                             "events": events})
        out[name] = excerpts
    return {"patterns": out}
