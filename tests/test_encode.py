"""Tests of encoding and of the SequenceDB container."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.encoding.encoder import Encoder, encode, load_mapping
from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import DataFileError, ParameterError


def _events(spec):
    """spec: list of (learner, time, action[, target])."""
    rows = [tuple(r) + ("",) * (4 - len(r)) for r in spec]
    df = pd.DataFrame(rows, columns=["learner", "time", "action", "target"])
    df["time"] = df["time"].astype(float)
    df["source_row"] = np.arange(1, len(df) + 1)
    return df


def _decoded(db):
    return [db.decode(i) for i in range(db.n_sequences)]


def test_fixed_pause_bins_and_token_order():
    ev = _events([("a", 0, "set_light"), ("a", 2, "advance_week"), ("a", 40, "measure_height"),
                  ("a", 50, "reset"), ("b", 0, "paint_pot"), ("b", 200, "paint_pot")])
    db = encode(ev, pause_strategy="fixed", pause_thresholds=[5, 30], implicit_pauses=("short",))
    # gaps: 2 (short, implicit), 38 (long), 10 (medium); b: 200 (long)
    assert _decoded(db) == [["set_light", "advance_week", "pause:long", "measure_height",
                             "pause:medium", "reset"], ["paint_pot", "pause:long", "paint_pot"]]
    assert db.is_pause.tolist() == [v.startswith("pause:") for v in db.vocab]
    # a pause token carries the time and source row of the event it follows
    seq0 = slice(db.offsets[0], db.offsets[1])
    assert db.times[seq0].tolist() == [0, 2, 2, 40, 40, 50]
    assert db.source_rows[seq0].tolist() == [1, 2, 2, 3, 3, 4]


def test_edges_are_right_open():
    ev = _events([("a", 0, "x"), ("a", 5, "y"), ("a", 10, "x")])
    db = encode(ev, pause_strategy="fixed", pause_thresholds=[5], implicit_pauses=())
    # a gap equal to an edge falls in the upper bin: [5, inf) is "long"
    assert _decoded(db) == [["x", "pause:long", "y", "pause:long", "x"]]


def _reference_edges(gaps, learners, n_bins):
    """The edge rule of seqmine.encoding.pauses written out, with numpy's weighted
    quantile (method="inverted_cdf", numpy >= 2.0) giving each candidate."""
    learners = pd.Series(learners)
    w = 1.0 / learners.map(learners.value_counts()).to_numpy()
    w = w / w.sum()

    def below(v):
        return w[gaps < v].sum()

    edges, done, prev = [], 0.0, -np.inf
    for k in range(1, n_bins):
        target = done + (1 - done) / (n_bins - k + 1)
        x = np.quantile(gaps, target, weights=w, method="inverted_cdf")
        above = gaps[gaps > x]
        cands = [v for v in [x] + ([above.min()] if len(above) else [])
                 if v > prev and below(v) > 0]
        if not cands:
            break
        e = cands[-1]  # the nearer by share below; the upper one on a tie (within 1e-9)
        if len(cands) == 2 and target - below(cands[0]) < below(cands[1]) - target - 1e-9:
            e = cands[0]
        edges.append(e)
        done, prev = below(e), e
    return np.array(edges)


def test_quantile_edges_match_numpy_and_pandas():
    rng = np.random.default_rng(3)
    gaps = np.round(rng.lognormal(2, 1, size=400), 3)
    times = np.concatenate([[0], np.cumsum(gaps)])
    ev = _events([("a", t, "x" if i % 2 else "y") for i, t in enumerate(times)])
    enc = Encoder(pause_strategy="quantile", pause_bins=3, implicit_pauses=()).fit(ev)
    diffs = np.diff(np.round(times * 1e6)) / 1e6
    # reference: numpy's quantile of the same gaps (one learner: equal weights)
    np.testing.assert_allclose(enc.edges_, _reference_edges(diffs, ["a"] * len(diffs), 3))
    # and the edges sit at the tertiles (within one gap of 400)
    for k, e in enumerate(enc.edges_, start=1):
        assert abs((diffs < e).mean() - k / 3) <= 1 / len(diffs)
    db = enc.transform(ev)
    got = [t for t in db.decode(0) if t.startswith("pause:")]
    # reference: pandas.cut with the same edges, left-closed bins
    ref = pd.cut(diffs, [-np.inf, *enc.edges_, np.inf], right=False,
                 labels=["short", "medium", "long"]).astype(str)
    assert got == ["pause:" + x for x in ref]
    # pandas.qcut puts the same number of gaps in each bin (up to ties at the edges)
    counts = pd.Series(got).value_counts()
    qc = pd.qcut(diffs, 3).value_counts()
    assert np.abs(np.sort(counts.to_numpy()) - np.sort(qc.to_numpy())).max() <= 1


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 4), st.integers(0, 30)), min_size=2, max_size=60),
       st.integers(2, 6))
def test_learner_weighted_edges_match_numpy_weighted_quantile(pairs, n_bins):
    from seqmine.encoding.pauses import learner_weighted_edges
    learners = np.array([p[0] for p in pairs])
    gaps = np.array([p[1] for p in pairs], dtype=np.int64) * 1_000_000  # a 1-second clock
    got = learner_weighted_edges(gaps, learners, n_bins)
    ref = _reference_edges(gaps.astype(float), learners, n_bins)
    np.testing.assert_array_equal(got, ref.astype(np.int64))
    # invariants: strictly increasing, positive, no empty bin, never more bins than values
    assert np.all(np.diff(got) > 0) and np.all(got > 0)
    assert len(got) <= min(n_bins - 1, len(np.unique(gaps)) - 1)
    counts = np.bincount(np.searchsorted(got, gaps, side="right"), minlength=len(got) + 1)
    assert np.all(counts > 0)


def test_learner_quantile_makes_speeds_comparable():
    fast = [("f", t, a) for t, a in zip([0, 1, 2, 4, 5, 6, 8], "xyxyxyx")]
    slow = [("s", t * 10, a) for t, a in zip([0, 1, 2, 4, 5, 6, 8], "xyxyxyx")]
    db = encode(_events(fast + slow), pause_strategy="learner_quantile", pause_bins=2,
                implicit_pauses=())
    a, b = _decoded(db)
    assert a == b  # the same rhythm at ten times the speed gives the same tokens
    glob = encode(_events(fast + slow), pause_strategy="quantile", pause_bins=2, implicit_pauses=())
    a, b = _decoded(glob)
    assert a != b


def test_no_pause_strategy():
    db = encode(_events([("a", 0, "x"), ("a", 100, "y")]), pause_strategy="none")
    assert _decoded(db) == [["x", "y"]] and not db.is_pause.any()


def test_template_mapping_and_collapse(tmp_path):
    ev = _events([("a", 0, "set_light", "pot1"), ("a", 1, "set_light", "pot1"),
                  ("a", 2, "set_light", "pot2"), ("a", 3, "hover", ""), ("a", 100, "measure_height", "pot1"),
                  ("a", 101, "measure_leaves", "pot1")])
    mp = tmp_path / "map.csv"
    mp.write_text("action,symbol\nhover,\nmeasure_height,measure\nmeasure_leaves,measure\n",
                  encoding="utf-8")
    mapping = load_mapping(mp)
    assert mapping == {"hover": "", "measure_height": "measure", "measure_leaves": "measure"}
    db = encode(ev, template="{action}:{target}", mapping=mapping, collapse_repeats=True,
                pause_strategy="fixed", pause_thresholds=[10], implicit_pauses=("short",))
    # hover dropped; the two identical set_light:pot1 merge; measure runs merge
    assert _decoded(db) == [["set_light:pot1", "set_light:pot2", "pause:long", "measure:pot1"]]
    # the merged run's pause is measured from the run's last event (t=2 -> t=100)
    db2 = encode(ev, mapping=mapping, collapse_repeats=True, pause_strategy="fixed",
                 pause_thresholds=[97.5], implicit_pauses=())
    assert _decoded(db2) == [["set_light", "pause:long", "measure"]]


def test_sessions_split_on_idle_gap():
    ev = _events([("a", 0, "x"), ("a", 10, "y"), ("a", 5000, "x"), ("a", 5001, "y")])
    db = encode(ev, unit="session", session_gap=600, pause_strategy="fixed",
                pause_thresholds=[60], implicit_pauses=())
    assert _decoded(db) == [["x", "pause:short", "y"], ["x", "pause:short", "y"]]
    assert db.learners.tolist() == ["a", "a"] and db.sessions.tolist() == ["s1", "s2"]


def test_groups_and_unseen_symbols_keep_ids():
    train = _events([("a", 0, "x"), ("a", 1, "y"), ("b", 0, "y")])
    test = _events([("c", 0, "z"), ("c", 1, "x")])
    enc = Encoder(pause_strategy="none").fit(train)
    db_tr = enc.transform(train, groups={"a": "strong", "b": "weak"}, group_names=["strong", "weak"])
    db_te = enc.transform(test, groups={"c": "weak"}, group_names=["strong", "weak"])
    assert db_tr.vocab == ["x", "y"] and db_te.vocab == ["x", "y", "z"]
    assert db_tr.groups.tolist() == [0, 1] and db_te.groups.tolist() == [1]


def test_encoder_round_trip_from_encoding():
    ev = _events([("a", 0, "x"), ("a", 3, "y"), ("a", 50, "x"), ("b", 0, "y"), ("b", 20, "x")])
    enc = Encoder(pause_bins=3, implicit_pauses=("short",)).fit(ev)
    db = enc.transform(ev)
    again = Encoder.from_encoding(db.encoding, vocab=db.vocab).transform(ev)
    assert again.equals(db)


@pytest.mark.parametrize("kwargs,match", [
    ({"template": "{target}"}, "must use {action}"),
    ({"template": "{learner}"}, "allowed fields"),
    ({"pause_strategy": "fixed"}, "needs pause_thresholds"),
    ({"pause_strategy": "fixed", "pause_thresholds": [30, 5]}, "strictly ascending"),
    ({"pause_strategy": "banded"}, "'pause_strategy' parameter of Encoder must be one of"),
    ({"implicit_pauses": ("tiny",)}, "not pause bin labels"),
])
def test_encoder_parameter_errors(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        Encoder(**kwargs).fit(_events([("a", 0, "x"), ("a", 1, "y")]))


def test_reserved_pause_prefix_in_actions():
    with pytest.raises(ParameterError, match="reserved prefix"):
        encode(_events([("a", 0, "pause:long"), ("a", 1, "y")]))


def test_mapping_file_errors(tmp_path):
    p = tmp_path / "m.csv"
    p.write_text("from,to\na,b\n", encoding="utf-8")
    with pytest.raises(DataFileError, match="columns 'action' and 'symbol'"):
        load_mapping(p)
    p.write_text("action,symbol\na,b\na,c\n", encoding="utf-8")
    with pytest.raises(DataFileError, match="mapped more than once"):
        load_mapping(p)


# ------------------------------------------------------------- SequenceDB
def test_save_load_round_trip(tmp_path):
    ev = _events([("a", 0, "x"), ("a", 3, "y"), ("a", 50, "x"), ("b", 0, "y"), ("b", 20, "x")])
    db = encode(ev, groups={"a": "strong", "b": "weak"}, group_names=["strong", "weak"],
                implicit_pauses=())
    db.save(tmp_path / "db")
    back = SequenceDB.load(tmp_path / "db")
    assert back.equals(db) and back.tokens.dtype == db.tokens.dtype


def test_load_rejects_non_db_folder(tmp_path):
    with pytest.raises(DataFileError, match="not a sequence database folder"):
        SequenceDB.load(tmp_path)


def test_cut_counts_events_not_pauses():
    db = SequenceDB.from_lists([["a", "p", "b", "p", "c", "d"], ["a"], []], pause_tokens=["p"])
    assert db.cut(0.5).decode(0) == ["a", "p", "b"]      # ceil(0.5 * 4) = 2 events
    assert db.cut(0.3).decode(0) == ["a", "p", "b"]      # ceil(1.2) = 2 events
    assert db.cut(0.25).decode(0) == ["a"]                # 1 event, trailing pause dropped
    assert db.cut(1.0).equals(db)
    assert db.cut(0.1).decode(1) == ["a"] and db.cut(0.1).decode(2) == []
    with pytest.raises(ParameterError, match=r"'fraction' parameter of SequenceDB.cut must be a float in \(0, 1\]"):
        db.cut(0)


@settings(max_examples=80, deadline=None)
@given(st.lists(st.lists(st.sampled_from(["a", "b", "p"]), max_size=12), min_size=1, max_size=6),
       st.floats(0.01, 1.0))
def test_cut_is_a_prefix_with_the_right_event_count(seqs, frac):
    import math
    db = SequenceDB.from_lists(seqs, pause_tokens=["p"], vocab=["a", "b", "p"])
    cut = db.cut(frac)
    for i, s in enumerate(seqs):
        got = cut.decode(i)
        assert got == s[:len(got)]                       # a prefix
        n_ev = sum(t != "p" for t in s)
        want = min(n_ev, max(math.ceil(round(frac * n_ev, 9)), min(n_ev, 1)))
        assert sum(t != "p" for t in got) == want
        assert not got or got[-1] != "p" or want == 0    # never ends in a pause


def test_subset_keeps_vocab_and_order():
    db = SequenceDB.from_lists([["a"], ["b", "a"], ["c"]], groups=["x", "y", "x"])
    sub = db.subset([2, 1])
    assert [sub.decode(i) for i in range(2)] == [["c"], ["b", "a"]]
    assert sub.vocab == db.vocab and sub.groups.tolist() == [0, 1]
    assert db.subset(np.array([True, False, True])).n_sequences == 2


@pytest.mark.parametrize("bins,first", [(1, "any"), (3, "short"), (5, "very_short"), (6, "p1")])
def test_shortest_names_the_first_bin_for_any_count(bins, first):
    # regression: the default implicit bin was the label 'short', which does not exist
    # for 1 or 6+ bins and is the second bin when there are 5
    ev = _events([("a", t, "x" if t % 2 else "y") for t in np.cumsum(range(12))])
    enc = Encoder(pause_bins=bins).fit(ev)
    assert enc.implicit_ == [first]


def test_pattern_names_round_trip_with_angle_brackets():
    # regression: names were split on '>' alone, so a token such as 'a>b' broke apart
    from seqmine.mining.patterns import format_pattern, parse_pattern
    vocab = ["a>b", "<script>", "c"]
    assert parse_pattern(format_pattern((0, 1, 2), vocab), vocab) == (0, 1, 2)
