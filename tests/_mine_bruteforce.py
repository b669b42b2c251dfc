"""Brute-force reference for the miner tests: enumerate every index tuple.

Independent of the miner: occurrences come from itertools.combinations over
positions, the constraints are checked literally as documented in
seqmine/patterns.py, and the instance count is the largest set of pairwise
disjoint occurrence spans found by memoised recursion (not the greedy scan).
"""

import itertools
from functools import lru_cache


def occurrences(seq, is_pause, max_len, max_gap=None, max_window=None, skip_pauses=False):
    """{pattern tuple: set of (start, end) spans} for one sequence."""
    out = {}
    n = len(seq)
    for k in range(1, min(max_len, n) + 1):
        for idx in itertools.combinations(range(n), k):
            ok = True
            if max_gap is not None:
                for a, b in zip(idx, idx[1:]):
                    between = range(a + 1, b)
                    g = sum(1 for t in between if not (skip_pauses and is_pause[seq[t]]))
                    if g > max_gap:
                        ok = False
                        break
            if ok and max_window is not None:
                span = range(idx[0], idx[-1] + 1)
                w = sum(1 for t in span if not (skip_pauses and is_pause[seq[t]]))
                ok = w <= max_window
            if ok:
                out.setdefault(tuple(seq[i] for i in idx), set()).add((idx[0], idx[-1]))
    return out


def max_disjoint(spans):
    """Largest number of pairwise disjoint closed intervals (exhaustive recursion)."""
    spans = sorted(spans)

    @lru_cache(maxsize=None)
    def best(after):
        res = 0
        for s, e in spans:
            if s > after:
                res = max(res, 1 + best(e))
        return res

    return best(-1)


def is_subsequence(p, q):
    it = iter(q)
    return all(any(x == y for y in it) for x in p)


def brute_mine(seqs, groups, n_groups, is_pause, *, min_support, min_length=1, max_length=4,
               max_gap=None, max_window=None, skip_pauses=False, start_with_action=False,
               end_with_action=False, closed=False, maximal=False):
    """{pattern: (support tuple per group, instance count per sequence)}."""
    per_seq = [occurrences(s, is_pause, max_length, max_gap, max_window, skip_pauses)
               for s in seqs]
    sizes = [sum(1 for g in groups if g == j) for j in range(n_groups)]
    cand = set()
    for d in per_seq:
        cand.update(d)
    result = {}
    for p in cand:
        if len(p) < min_length:
            continue
        if start_with_action and is_pause[p[0]]:
            continue
        if end_with_action and is_pause[p[-1]]:
            continue
        sup = [0] * n_groups
        for d, g in zip(per_seq, groups):
            if g >= 0 and p in d:
                sup[g] += 1
        if isinstance(min_support, int):
            freq = any(sup[j] >= min_support for j in range(n_groups) if sizes[j] > 0)
        else:
            freq = any(sup[j] / sizes[j] >= min_support for j in range(n_groups) if sizes[j] > 0)
        if freq:
            counts = [max_disjoint(d[p]) if p in d else 0 for d in per_seq]
            result[p] = (tuple(sup), counts)
    if closed or maximal:
        keep = {}
        for p, v in result.items():
            supers = [q for q in result if len(q) > len(p) and is_subsequence(p, q)]
            if maximal and supers:
                continue
            if closed and any(result[q][0] == v[0] for q in supers):
                continue
            keep[p] = v
        result = keep
    return result
