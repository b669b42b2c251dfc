"""Tests of example excerpts: the occurrence finder agrees with brute force."""

import itertools

from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.examples import find_occurrence, pattern_examples
from seqmine.mine import mine
from seqmine.sequences import SequenceDB


def _brute(seq, pat, max_gap, max_window, skip, is_pause):
    """Reference: every index tuple, keep the valid one with the earliest end."""
    best = None
    for idx in itertools.combinations(range(len(seq)), len(pat)):
        if any(seq[i] != t for i, t in zip(idx, pat)):
            continue
        cnt = lambda a, b: sum(1 for x in range(a, b) if not (skip and is_pause[seq[x]]))  # noqa: E731
        if max_gap is not None and any(cnt(a + 1, b) > max_gap for a, b in zip(idx, idx[1:])):
            continue
        if max_window is not None and cnt(idx[0], idx[-1] + 1) > max_window:
            continue
        if best is None or idx[-1] < best[-1]:
            best = idx
    return best


@settings(max_examples=300, deadline=None)
@given(st.lists(st.integers(0, 2), max_size=9), st.lists(st.integers(0, 2), min_size=1, max_size=3),
       st.one_of(st.none(), st.integers(0, 2)), st.one_of(st.none(), st.integers(1, 6)),
       st.booleans())
def test_find_occurrence_ends_first_like_brute_force(seq, pat, max_gap, max_window, skip):
    is_pause = [False, False, True]  # token 2 is a pause
    got = find_occurrence(seq, pat, max_gap=max_gap, max_window=max_window, skip_pauses=skip,
                          is_pause=is_pause)
    ref = _brute(seq, pat, max_gap, max_window, skip, is_pause)
    assert (got is None) == (ref is None)
    if got is not None:
        assert got[-1] == ref[-1]  # same earliest end
        assert [seq[i] for i in got] == list(pat)


def test_pattern_examples_shape():
    db = SequenceDB.from_lists([["a", "p", "b", "c"], ["c", "a", "b"], ["c", "c"]],
                               groups=["x", "y", "x"], pause_tokens=["p"])
    ps = mine(db, min_support=0.5, min_length=2, max_length=2, max_gap=1)
    ex = pattern_examples(db, ps, ["a > b"], favours={"a > b": "y"}, context=1)
    (only,) = ex["patterns"]["a > b"]
    assert only["learner"] == "L1" and only["group"] == "y"
    assert [e["token"] for e in only["events"]] == ["c", "a", "b"]
    assert [e["matched"] for e in only["events"]] == [False, True, True]
