"""Example excerpts: occurrences checked against a brute-force enumerator."""

import itertools
import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError
from seqmine.mining.patterns import pattern_id
from seqmine.reporting.examples import build_examples, find_occurrence
from seqmine.reporting.render import render_report, write_examples

VOCAB = ["a", "b", "c", "pause:long"]
IS_PAUSE = np.array([False, False, False, True])


def _brute(seq, pattern, max_gap, max_window, skip_pauses):
    """All occurrences by enumeration, with the semantics of seqmine.mining.patterns."""
    counted = [not (skip_pauses and IS_PAUSE[t]) for t in seq]
    found = []
    for pos in itertools.combinations(range(len(seq)), len(pattern)):
        if any(seq[p] != q for p, q in zip(pos, pattern)):
            continue
        gaps_ok = max_gap is None or all(
            sum(counted[x] for x in range(a + 1, b)) <= max_gap for a, b in zip(pos, pos[1:]))
        span = sum(counted[x] for x in range(pos[0], pos[-1] + 1))
        if gaps_ok and (max_window is None or span <= max_window):
            found.append(pos)
    return found


@settings(max_examples=300, deadline=None)
@given(seq=st.lists(st.integers(0, 3), max_size=9), pattern=st.lists(st.integers(0, 3),
                                                                        min_size=1, max_size=3),
       max_gap=st.one_of(st.none(), st.integers(0, 3)),
       max_window=st.one_of(st.none(), st.integers(1, 6)), skip_pauses=st.booleans())
def test_find_occurrence_matches_brute_force(seq, pattern, max_gap, max_window, skip_pauses):
    got = find_occurrence(np.array(seq, dtype=np.int64), pattern, IS_PAUSE, max_gap=max_gap,
                          max_window=max_window, skip_pauses=skip_pauses)
    every = _brute(seq, pattern, max_gap, max_window, skip_pauses)
    if not every:
        assert got is None
        return
    assert got in every  # a valid occurrence ...
    end = min(p[-1] for p in every)  # ... ending first, and starting latest among those
    assert got[-1] == end
    assert got[0] == max(p[0] for p in every if p[-1] == end)


def _db():
    seqs = [["a", "b", "pause:long", "c", "a"], ["c", "a", "c", "b"], ["b", "b"],
            ["a", "c", "c", "c", "c", "c", "c", "b"]]
    db = SequenceDB.from_lists(seqs, groups=["s", "w", "s", "w"], group_names=["s", "w"],
                               pause_tokens=["pause:long"])
    db.times[:] = np.arange(db.n_tokens, dtype=float) * 10.0
    return db


def test_build_examples_layout_and_groups():
    db = _db()
    ex = build_examples(db, ["a > b", "b > c", "zz > a"], favours=["w", "", ""],
                        max_gap=1, context=1, per_pattern=3)
    pats = {k: ex["patterns"][pattern_id(k.split(" > "))] for k in ("a > b", "b > c", "zz > a")}
    # In group w only L1 (c a c b) has a > b within a gap of 1; L3's gap is 6.
    assert [(e["learner"], e["group"]) for e in pats["a > b"]] == [("L1", "w")]
    assert pats["zz > a"] == []  # unknown token: no excerpt
    # "b > c" with gap 1 over the pause: sequence 0 (b, pause, c).
    (only,) = pats["b > c"]
    assert only["learner"] == "L0" and only["group"] == "s"
    toks = [(e["token"], e["matched"]) for e in only["events"]]
    assert toks == [("a", False), ("b", True), ("pause:long", False), ("c", True),
                    ("a", False)]
    pause = only["events"][2]
    assert pause["pause"] == 20.0  # from the b event to the c event


def test_long_stretches_are_elided():
    db = _db()
    ex = build_examples(db, ["a > b"], favours=["w"], max_gap=None, context=1, max_span=4)
    events = [e for x in ex["patterns"][pattern_id(["a", "b"])] for e in x["events"]
              if x["learner"] == "L3"]
    assert {"elided": 4} in events
    assert [e["token"] for e in events if "token" in e] == ["a", "c", "c", "b"]


def test_build_examples_is_deterministic_and_checks_input():
    db = _db()
    assert build_examples(db, ["a > b"], random_state=3) == build_examples(db, ["a > b"], random_state=3)
    with pytest.raises(ParameterError, match="'favours' has 1 entries for 2 patterns"):
        build_examples(db, ["a", "b"], favours=["s"])
    with pytest.raises(ParameterError, match="per_pattern"):
        build_examples(db, ["a"], per_pattern=0)


def test_write_examples_feeds_the_report(tmp_path):
    db = _db()
    table = pd.DataFrame({"pattern": ["a > b", "b > c", "c"], "q_value": [0.01, 0.02, 0.5],
                          "favours": ["w", "s", ""], "redundant_of": ["", "", ""],
                          "support_s": [0.5, 0.5, 0.5], "support_w": [1.0, 0.0, 1.0]})
    table.to_csv(tmp_path / "patterns.csv", index=False)
    path = write_examples(tmp_path, db, table, max_gap=1)
    data = json.loads(path.read_text(encoding="utf-8"))
    # significant ones only, keyed by pattern id
    assert list(data["patterns"]) == [pattern_id(["a", "b"]), pattern_id(["b", "c"])]
    text = render_report(tmp_path).read_text(encoding="utf-8")
    assert "learner L0" in text and 'class="ev hit"' in text and "20 s" in text
