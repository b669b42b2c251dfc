"""Example excerpts: where a pattern occurs in real sequences.

:func:`build_examples` finds, for each pattern, one occurrence in each of a few
sequences (the earliest-ending occurrence, and among those the one that starts
latest) under the occurrence semantics of :mod:`seqmine.mining.patterns`, and returns the
excerpt around it in the ``examples.json`` layout read by :mod:`seqmine.reporting.render`.
The report's pattern cards and the detectors file (one short example per detector)
both use it.
"""

from __future__ import annotations

import math

import numpy as np

from .._util.checks import check_int
from ..config import DEFAULT_CONFIG
from ..errors import ParameterError
from .patterns import PATTERN_SEPARATOR, pattern_id

__all__ = ["build_examples", "find_occurrence"]


_MINE = DEFAULT_CONFIG["mine"]


def build_examples(db, patterns, *, favours=None, max_gap=_MINE["max_gap"],
                   max_window=_MINE["max_window"], skip_pauses=_MINE["skip_pauses"],
                   per_pattern=2, context=2, max_span=16, random_state=DEFAULT_CONFIG["seed"]):
    """Excerpts of real sequences showing where each pattern occurs.

    Parameters
    ----------
    db : SequenceDB
    patterns : list of (list of str or str)
        Patterns as token lists (exact), or as readable text (tokens joined by
        ``" > "``; a token containing ``" > "`` needs the list form).
    favours : list of str, optional
        Per pattern, the group to draw examples from (``""`` = any grouped sequence).
    max_gap, max_window, skip_pauses
        Matching constraints, as used for mining (see :mod:`seqmine.mining.patterns`;
        defaults as in :func:`seqmine.mining.miner.mine`).
    per_pattern : int, default 2
        Excerpts per pattern (fewer when fewer sequences contain it).
    context : int, default 2
        Tokens shown before the first and after the last matched token.
    max_span : int, default 16
        Longer stretches between matched tokens are shortened to ``context`` tokens
        on each side, with an ``{"elided": n}`` marker in between.
    random_state : int, default 20261202
        Seed of the order in which sequences are tried.

    Returns
    -------
    dict
        ``{"patterns": {pattern_id: [excerpt, ...]}}`` (see
        :func:`~seqmine.mining.patterns.pattern_id`); an excerpt is ``{"learner",
        "group", "events": [{"time", "token", "matched", "pause"?} or {"elided"}]}``;
        ``pause`` (seconds) is set on pause tokens: the time from the event before
        to the event after.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a", "x", "b", "c"], ["b", "a"]], groups=["s", "w"])
    >>> ex = build_examples(db, [["a", "b"]], max_gap=1)
    >>> [(e["token"], e["matched"]) for e in ex["patterns"][pattern_id(["a", "b"])][0]["events"]]
    [('a', True), ('x', False), ('b', True), ('c', False)]
    """
    per_pattern = check_int(per_pattern, "per_pattern", "build_examples", minimum=1)
    context = check_int(context, "context", "build_examples", minimum=0)
    max_span = check_int(max_span, "max_span", "build_examples", minimum=1)
    max_gap = check_int(max_gap, "max_gap", "build_examples", minimum=0, allow_none=True)
    max_window = check_int(max_window, "max_window", "build_examples", minimum=1,
                           allow_none=True)
    if favours is not None and len(favours) != len(patterns):
        raise ParameterError(
            f"build_examples: 'favours' has {len(favours)} entries for {len(patterns)} "
            f"patterns; give one group name (or '') per pattern.")
    index = {v: i for i, v in enumerate(db.vocab)}
    rng = np.random.default_rng(random_state)
    order = rng.permutation(db.n_sequences)
    groups = np.asarray(db.groups)
    out = {}
    for k, pat in enumerate(patterns):
        names = ([str(t) for t in pat] if isinstance(pat, (list, tuple))
                 else [t.strip() for t in str(pat).split(PATTERN_SEPARATOR)])
        key = pattern_id(names)
        if any(n not in index for n in names):
            out[key] = []
            continue
        ids = [index[n] for n in names]
        want = (favours[k] if favours is not None else "") or ""
        if want and want in db.group_names:
            candidates = order[groups[order] == db.group_names.index(want)]
        else:
            candidates = order[groups[order] >= 0]
        excerpts = []
        for s in candidates:
            seq = db.sequence(int(s))
            pos = find_occurrence(seq, ids, db.is_pause, max_gap=max_gap,
                                  max_window=max_window, skip_pauses=skip_pauses)
            if pos is None:
                continue
            excerpts.append(_excerpt(db, int(s), pos, context, max_span))
            if len(excerpts) == per_pattern:
                break
        out[key] = excerpts
    return {"patterns": out}


def find_occurrence(seq, pattern, is_pause, *, max_gap=None, max_window=None,
                    skip_pauses=False):
    """Positions of the earliest-ending occurrence of ``pattern`` in ``seq``, or None.

    Among occurrences ending at the same position, the one starting latest is
    returned. Gap and window follow :mod:`seqmine.mining.patterns`: the gap counts tokens
    strictly between two matched positions, the window the span from the first to
    the last; with ``skip_pauses`` pause tokens are not counted in either.

    Parameters
    ----------
    seq : array of int
        Token ids of one sequence.
    pattern : sequence of int
    is_pause : array of bool
        Pause flag per token id.
    max_gap, max_window : int or None
    skip_pauses : bool

    Returns
    -------
    tuple of int or None

    Examples
    --------
    >>> import numpy as np
    >>> find_occurrence(np.array([0, 1, 0, 2, 1]), [0, 1], np.zeros(3, bool), max_gap=0)
    (0, 1)
    >>> find_occurrence(np.array([0, 2, 2, 1]), [0, 1], np.zeros(3, bool), max_gap=1) is None
    True
    """
    seq = np.asarray(seq)
    n, k = len(seq), len(pattern)
    if k == 0 or n < k:
        return None
    counted = ~np.asarray(is_pause, dtype=bool)[seq] if skip_pauses else np.ones(n, bool)
    cum = np.concatenate([[0], np.cumsum(counted)])  # counted tokens in [a, b) = cum[b]-cum[a]
    gap_lim = math.inf if max_gap is None else max_gap
    win_lim = math.inf if max_window is None else max_window
    # best[j][i]: latest start of a valid occurrence of pattern[:j+1] ending at i (or -1).
    best = [np.full(n, -1, dtype=np.int64) for _ in range(k)]
    back = [np.full(n, -1, dtype=np.int64) for _ in range(k)]
    for i in range(n):
        for j in range(min(k, i + 1) - 1, -1, -1):
            if seq[i] != pattern[j]:
                continue
            if j == 0:
                start, prev = i, -1
            else:
                start, prev = -1, -1
                for p in range(i - 1, j - 2, -1):
                    if cum[i] - cum[p + 1] > gap_lim:
                        break
                    if best[j - 1][p] > start:
                        start, prev = best[j - 1][p], p
                if start < 0:
                    continue
            if cum[i + 1] - cum[start] > win_lim:
                continue
            best[j][i], back[j][i] = start, prev
            if j == k - 1:
                positions = [i]
                for jj in range(k - 1, 0, -1):
                    positions.append(int(back[jj][positions[-1]]))
                return tuple(int(x) for x in reversed(positions))
    return None


def _excerpt(db, s, positions, context, max_span):
    seq = db.sequence(s)
    lo, hi = int(db.offsets[s]), int(db.offsets[s + 1])
    times = db.times[lo:hi]
    n = len(seq)
    first, last = positions[0], positions[-1]
    keep = set(range(max(0, first - context), min(n, last + context + 1)))
    if last - first + 1 > max_span:
        keep = set()
        for p in positions:
            keep.update(range(max(0, p - context), min(n, p + context + 1)))
    matched = set(positions)
    events, prev = [], None
    for i in sorted(keep):
        if prev is not None and i > prev + 1:
            events.append({"elided": i - prev - 1})
        tok = int(seq[i])
        ev = {"time": float(times[i]), "token": db.vocab[tok], "matched": i in matched}
        if db.is_pause[tok]:
            before = i - 1
            after = next((j for j in range(i + 1, n) if not db.is_pause[int(seq[j])]), None)
            if before >= 0 and after is not None:
                ev["pause"] = float(times[after] - times[before])
        events.append(ev)
        prev = i
    g = int(db.groups[s])
    return {"learner": str(db.learners[s]),
            "group": db.group_names[g] if 0 <= g < len(db.group_names) else "",
            "events": events}
