"""Property tests: the miner and the matcher equal a brute-force enumerator.

The reference below enumerates every index tuple of every small random sequence,
checks the gap/window/pause rules literally as documented in seqmine/patterns.py and
counts instances as the largest set of pairwise disjoint spans by exhaustive
recursion (not the greedy scan the miner uses). It shares no code with the miner.
"""

import itertools
from functools import lru_cache

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import seqmine.mining.miner as mine_module
from seqmine.encoding.sequences import SequenceDB

from _unconstrained import match, mine, mine_parallel


# ------------------------------------------------------------ brute force
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


# ------------------------------------------------------------ properties
VOCAB = ["a", "b", "c", "pause:short", "pause:long"]
PAUSES = ["pause:short", "pause:long"]
IS_PAUSE = [v in PAUSES for v in VOCAB]

SETTINGS = settings(max_examples=700, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])


@st.composite
def databases(draw):
    n_vocab = draw(st.integers(2, 5))
    n_seq = draw(st.integers(1, 7))
    seqs = [draw(st.lists(st.integers(0, n_vocab - 1), min_size=0, max_size=8))
            for _ in range(n_seq)]
    grouped = draw(st.booleans())
    if grouped:
        groups = [draw(st.sampled_from([0, 1, 1, 0, -1])) for _ in range(n_seq)]
    else:
        groups = None
    return seqs, groups


@st.composite
def constraint_settings(draw):
    max_length = draw(st.integers(1, 4))
    min_length = draw(st.integers(1, max_length))
    max_gap = draw(st.one_of(st.none(), st.integers(0, 3)))
    max_window = draw(st.one_of(st.none(), st.integers(max(min_length, 1), 6)))
    return dict(
        min_length=min_length, max_length=max_length, max_gap=max_gap, max_window=max_window,
        skip_pauses=draw(st.booleans()), start_with_action=draw(st.booleans()),
        end_with_action=draw(st.booleans()),
        closed=draw(st.booleans()), maximal=draw(st.booleans()) and draw(st.booleans()))


def _db(seqs, groups):
    names = [[VOCAB[t] for t in s] for s in seqs]
    if groups is None:
        return SequenceDB.from_lists(names, pause_tokens=PAUSES, vocab=VOCAB)
    return SequenceDB.from_lists(names, groups=groups, group_names=["strong", "weak"],
                                 pause_tokens=PAUSES, vocab=VOCAB)


def _as_dict(ps):
    dense = ps.counts.toarray()
    return {p: (tuple(int(x) for x in ps.support_counts[i]), dense[:, i].tolist())
            for i, p in enumerate(ps.patterns)}


@pytest.mark.slow
@SETTINGS
@given(databases(), constraint_settings(), st.data())
def test_mine_equals_brute_force(dbspec, cons, data):
    seqs, groups = dbspec
    db = _db(seqs, groups)
    if groups is None:
        eff_groups, n_groups = [0] * len(seqs), 1
    else:
        eff_groups, n_groups = groups, 2
    sizes = [sum(g == j for g in eff_groups) for j in range(n_groups)]
    if max(sizes) == 0 or not any(seqs):
        return  # no grouped sequence or no token: mine refuses (tested elsewhere)
    if data.draw(st.booleans()):
        min_support = data.draw(st.integers(1, max(sizes)))
    else:
        min_support = data.draw(st.sampled_from([0.2, 0.25, 1 / 3, 0.5, 0.6, 2 / 3, 1.0]))
    # a window alone runs in the gap engine (implied gap) or tracks minimal windows
    frontier = data.draw(st.booleans())
    saved = mine_module._IMPLIED_GAP_WINDOW
    mine_module._IMPLIED_GAP_WINDOW = 0 if frontier else saved
    try:
        ps = mine(db, min_support=min_support, **cons)
    finally:
        mine_module._IMPLIED_GAP_WINDOW = saved
    ref = brute_mine(seqs, eff_groups, n_groups, IS_PAUSE, min_support=min_support, **cons)
    got = _as_dict(ps)
    assert set(got) == set(ref)
    for p in ref:
        assert got[p] == ref[p], p
    # deterministic order: by length, then last item, item before it, ...
    assert ps.patterns == sorted(ps.patterns, key=lambda p: (len(p), p[::-1]))


@pytest.mark.slow
@SETTINGS
@given(databases(), st.data())
def test_match_equals_brute_force(dbspec, data):
    seqs, groups = dbspec
    db = _db(seqs, groups)
    n_vocab = len(VOCAB)
    patterns = data.draw(st.lists(st.lists(st.integers(0, n_vocab - 1), min_size=1, max_size=4)
                                  .map(tuple), min_size=1, max_size=6))
    max_gap = data.draw(st.one_of(st.none(), st.integers(0, 3)))
    max_window = data.draw(st.one_of(st.none(), st.integers(1, 6)))
    skip = data.draw(st.booleans())
    frontier = data.draw(st.booleans())
    saved = mine_module._IMPLIED_GAP_WINDOW
    mine_module._IMPLIED_GAP_WINDOW = 0 if frontier else saved
    try:
        ps = match(db, patterns, max_gap=max_gap, max_window=max_window, skip_pauses=skip)
    finally:
        mine_module._IMPLIED_GAP_WINDOW = saved
    assert ps.patterns == patterns
    occ = [occurrences(s, IS_PAUSE, 4, max_gap, max_window, skip) for s in seqs]
    dense = ps.counts.toarray()
    for i, p in enumerate(patterns):
        expected = [max_disjoint(d[p]) if p in d else 0 for d in occ]
        assert dense[:, i].tolist() == expected, p
        if groups is None:
            assert ps.support_counts[i].tolist() == [sum(c > 0 for c in expected)]
        else:
            sup = [sum(c > 0 for c, g in zip(expected, groups) if g == j) for j in range(2)]
            assert ps.support_counts[i].tolist() == sup


@settings(max_examples=300, deadline=None)
@given(databases(), constraint_settings())
def test_match_reproduces_mine(dbspec, cons):
    # the matcher on the mined patterns gives the same supports and counts
    seqs, groups = dbspec
    db = _db(seqs, groups)
    if (groups is not None and not any(g >= 0 for g in groups)) or not any(seqs):
        return
    ps = mine(db, min_support=1, **cons)
    m = match(db, ps.patterns, max_gap=cons["max_gap"], max_window=cons["max_window"],
              skip_pauses=cons["skip_pauses"])
    assert np.array_equal(m.support_counts, ps.support_counts)
    assert (m.counts != ps.counts).nnz == 0


@settings(max_examples=300, deadline=None)
@given(databases(), constraint_settings(), st.randoms(use_true_random=False))
def test_invariants_extension_and_shuffle(dbspec, cons, rnd):
    seqs, groups = dbspec
    db = _db(seqs, groups)
    if (groups is not None and not any(g >= 0 for g in groups)) or not any(seqs):
        return
    ps = mine(db, min_support=1, **{**cons, "closed": False, "maximal": False,
                                     "min_length": 1, "end_with_action": False})
    sup = {p: ps.support_counts[i] for i, p in enumerate(ps.patterns)}
    # support never grows when a pattern is extended (its prefix is always reported)
    for p, s in sup.items():
        if len(p) > 1:
            assert np.all(sup[p[:-1]] >= s)
    # shuffling the sequence order gives the same patterns and supports
    order = list(range(len(seqs)))
    rnd.shuffle(order)
    db2 = _db([seqs[i] for i in order], None if groups is None else [groups[i] for i in order])
    ps2 = mine(db2, min_support=1, **{**cons, "closed": False, "maximal": False,
                                       "min_length": 1, "end_with_action": False})
    assert ps2.patterns == ps.patterns
    assert np.array_equal(ps2.support_counts, ps.support_counts)
    assert (ps2.counts != ps.counts[order]).nnz == 0


@st.composite
def databases_with_learners(draw):
    seqs, groups = draw(databases())
    n_learners = draw(st.integers(1, max(1, len(seqs))))
    learners = [draw(st.integers(0, n_learners - 1)) for _ in seqs]
    return seqs, groups, learners


def brute_learner_mine(seqs, groups, learners, n_groups, *, min_support, closed, maximal,
                       **cons):
    """Patterns frequent by distinct learners per group (a learner counts once however
    many of its sequences hold the pattern); supports and counts stay per sequence."""
    every = brute_mine(seqs, groups, n_groups, IS_PAUSE, min_support=1, **cons)
    units = {(lrn, g) for lrn, g in zip(learners, groups) if g >= 0}
    sizes = [sum(1 for _, g in units if g == j) for j in range(n_groups)]
    result = {}
    for p, (sup, counts) in every.items():
        by_learner = [len({lrn for lrn, g, c in zip(learners, groups, counts)
                           if g == j and c > 0}) for j in range(n_groups)]
        if isinstance(min_support, int):
            freq = any(by_learner[j] >= min_support for j in range(n_groups) if sizes[j])
        else:
            freq = any(by_learner[j] / sizes[j] >= min_support
                       for j in range(n_groups) if sizes[j])
        if freq:
            result[p] = (sup, counts)
    if closed or maximal:
        result = {p: v for p, v in result.items()
                  if not (maximal and any(len(q) > len(p) and is_subsequence(p, q)
                                          for q in result))
                  and not (closed and any(len(q) > len(p) and is_subsequence(p, q)
                                          and result[q][0] == v[0] for q in result))}
    return result


@pytest.mark.slow
@SETTINGS
@given(databases_with_learners(), constraint_settings(), st.data())
def test_learner_support_equals_brute_force(dbspec, cons, data):
    # Reference: the exhaustive enumerator above, counting distinct learners per group.
    seqs, groups, learners = dbspec
    names = [[VOCAB[t] for t in s] for s in seqs]
    lids = [f"L{x}" for x in learners]
    if groups is None:
        db = SequenceDB.from_lists(names, pause_tokens=PAUSES, vocab=VOCAB, learners=lids)
        eff_groups, n_groups = [0] * len(seqs), 1
    else:
        db = SequenceDB.from_lists(names, groups=groups, group_names=["strong", "weak"],
                                   pause_tokens=PAUSES, vocab=VOCAB, learners=lids)
        eff_groups, n_groups = groups, 2
    sizes = [len({lrn for lrn, g in zip(learners, eff_groups) if g == j})
             for j in range(n_groups)]
    if max(sizes) == 0 or not any(seqs):
        return
    if data.draw(st.booleans()):
        min_support = data.draw(st.integers(1, max(sizes)))
    else:
        min_support = data.draw(st.sampled_from([0.2, 1 / 3, 0.5, 2 / 3, 1.0]))
    ps = mine(db, min_support=min_support, support_unit="learner", **cons)
    ref = brute_learner_mine(seqs, eff_groups, learners, n_groups, min_support=min_support,
                             **cons)
    got = _as_dict(ps)
    assert set(got) == set(ref)
    for p in ref:
        assert got[p] == ref[p], p
    par = mine_parallel(db, min_support=min_support, support_unit="learner", partitions=2,
                        **cons)
    assert par.patterns == ps.patterns
    assert np.array_equal(par.support_counts, ps.support_counts)
