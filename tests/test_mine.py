"""Worked examples, reference-library equality, bad input and the command line of the miner."""

import json
import random

import numpy as np
import pandas as pd
import pytest
from prefixspan import PrefixSpan

import seqmine.mining.miner as mine_module
from seqmine.cli.main import main
from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import DataFileError, ParameterError, PatternExplosionError
from seqmine.mining.miner import load_patternset, pattern_table, save_patternset

from _unconstrained import match, mine  # noqa: I001  (tests/ helper)


def _ints_db(seqs, **kw):
    vocab = sorted({t for s in seqs for t in s})
    return SequenceDB.from_lists([[str(t) for t in s] for s in seqs],
                                 vocab=[str(v) for v in vocab], **kw)


def _int_patterns(ps):
    return {tuple(int(ps.vocab[t]) for t in p): int(ps.support_counts[i].sum())
            for i, p in enumerate(ps.patterns)}


# ---------------------------------------------------------------- worked examples
def test_single_symbol_worked_example():
    # Source: README of the prefixspan package on PyPI (Chuancong Gao, PrefixSpan-py,
    # version 0.5.2, "API Usage": the database and the 14 frequent patterns that
    # ps.frequent(2) prints); recomputed by brute-force enumeration.
    seqs = [[0, 1, 2, 3, 4], [1, 1, 1, 3, 4], [2, 1, 2, 2, 0], [1, 1, 1, 2, 2]]
    expected = {(0,): 2, (1,): 4, (1, 2): 3, (1, 2, 2): 2, (1, 3): 2, (1, 3, 4): 2,
                (1, 4): 2, (1, 1): 2, (1, 1, 1): 2, (2,): 3, (2, 2): 2, (3,): 2,
                (3, 4): 2, (4,): 2}
    ps = mine(_ints_db(seqs), min_support=2, max_length=None)
    assert _int_patterns(ps) == expected
    assert ps.n_patterns == 14
    # as a fraction: 2 of 4 sequences
    assert _int_patterns(mine(_ints_db(seqs), min_support=0.5, max_length=None)) == expected


def test_pei_example_single_item_subcases():
    # Pei et al., PrefixSpan (ICDE 2001 / TKDE 2004), the 4-sequence example with min
    # support 2. Our miner has single-symbol events, so each itemset is written out in
    # alphabetical order. Length-1 supports do not depend on that: a:4, b:4, c:4, d:3,
    # e:3, f:3, g:1 (infrequent). Of the length-2 patterns with prefix a, aa:2, ab:4 and
    # ac:4 are unaffected too (no itemset holds a together with the later item in a way
    # that adds an occurrence); ad and af are not comparable (the (ad)/(af) itemsets
    # become ordered pairs), so they are left out.
    db_itemsets = [
        [["a"], ["a", "b", "c"], ["a", "c"], ["d"], ["c", "f"]],
        [["a", "d"], ["c"], ["b", "c"], ["a", "e"]],
        [["e", "f"], ["a", "b"], ["d", "f"], ["c"], ["b"]],
        [["e"], ["g"], ["a", "f"], ["c"], ["b"], ["c"]],
    ]
    flat = [[item for itemset in s for item in itemset] for s in db_itemsets]
    db = SequenceDB.from_lists(flat)
    ps = mine(db, min_support=2, max_length=2)
    sup = dict(zip(ps.names, ps.support_counts[:, 0].tolist()))
    assert {k: v for k, v in sup.items() if " > " not in k} == \
        {"a": 4, "b": 4, "c": 4, "d": 3, "e": 3, "f": 3}
    assert sup["a > a"] == 2 and sup["a > b"] == 4 and sup["a > c"] == 4


# ------------------------------------------------------------- reference library
@pytest.mark.parametrize("seed", range(6))
def test_equals_prefixspan_package(seed):
    # The prefixspan package (PyPI 0.5.2) serves as an outside reference only.
    rng = random.Random(seed)
    n_vocab = rng.randint(3, 7)
    seqs = [[rng.randrange(n_vocab) for _ in range(rng.randint(0, 14))] for _ in range(40)]
    seqs = [s for s in seqs if s] or [[0]]
    minsup = rng.randint(3, 10)
    ref = PrefixSpan(seqs)
    ref.maxlen = 4
    expected = {tuple(p): sup for sup, p in ref.frequent(minsup)}
    got = _int_patterns(mine(_ints_db(seqs), min_support=minsup, max_length=4))
    assert got == expected


# ---------------------------------------------------------------- semantics
def test_frequent_in_one_group_is_enough():
    seqs = [["a", "b"], ["a", "b"], ["b", "a"], ["c"], ["c"], ["c", "a"]]
    db = SequenceDB.from_lists(seqs, groups=["x", "x", "x", "y", "y", "y"])
    ps = mine(db, min_support=0.6, max_length=2)
    sup = dict(zip(ps.names, ps.support_counts.tolist()))
    assert sup == {"a": [3, 1], "b": [3, 0], "c": [0, 3], "a > b": [2, 0]}
    assert ps.group_names == ["x", "y"]


def test_closed_and_maximal_use_the_support_vector():
    # Hand-worked. With max_gap 0, "a > c" occurs only in "a c" (group y) and
    # "a > b > c" only in "a b c" (group x): equal pooled support (1) but different
    # per-group vectors, so the closed filter keeps "a > c" with groups and drops it
    # without them.
    seqs = [["a", "b", "c"], ["a", "c"]]
    db = SequenceDB.from_lists(seqs, groups=["x", "y"])
    ps = mine(db, min_support=1, max_gap=0, closed=True)
    assert ps.names == ["a", "c", "a > c", "a > b > c"]
    assert ps.support_counts.tolist() == [[1, 1], [1, 1], [0, 1], [1, 0]]
    pooled = SequenceDB.from_lists(seqs)
    assert mine(pooled, min_support=1, max_gap=0, closed=True).names == ["a", "c", "a > b > c"]
    assert mine(pooled, min_support=1, maximal=True).names == ["a > b > c"]
    assert mine(pooled, min_support=1, max_gap=0, maximal=True).names == ["a > b > c"]


def test_instance_counts_gap_and_pauses():
    # Hand-worked: "a x b a b" with max_gap 0 has one contiguous a > b (positions 3-4);
    # with max_gap 1 the greedy takes (0, 2) then (3, 4): two instances.
    db = SequenceDB.from_lists([["a", "x", "b", "a", "b"]])
    assert match(db, ["a > b"], max_gap=0).counts.toarray().tolist() == [[1]]
    assert match(db, ["a > b"], max_gap=1).counts.toarray().tolist() == [[2]]
    # a pause between two actions does not count toward the gap when skipped
    db = SequenceDB.from_lists([["a", "pause:long", "b"]], pause_tokens=["pause:long"])
    assert match(db, ["a > b"], max_gap=0).counts.toarray().tolist() == [[0]]
    assert match(db, ["a > b"], max_gap=0, skip_pauses=True).counts.toarray().tolist() == [[1]]
    assert match(db, ["a > b"], max_window=2, skip_pauses=True).counts.toarray().tolist() == [[1]]
    assert match(db, ["a > b"], max_window=2).counts.toarray().tolist() == [[0]]


def test_start_and_end_with_action():
    db = SequenceDB.from_lists([["a", "pause:long", "b"]] * 2, pause_tokens=["pause:long"])
    names = mine(db, min_support=1.0, start_with_action=True, end_with_action=True).names
    assert names == ["a", "b", "a > b", "a > pause:long > b"]


def test_match_accepts_names_ids_and_patternsets():
    db = SequenceDB.from_lists([["a", "b", "c"], ["c", "b"]])
    by_name = match(db, ["a > b", ["c", "b"], (0, 2)])
    assert by_name.patterns == [(0, 1), (2, 1), (0, 2)]
    assert by_name.support_counts[:, 0].tolist() == [1, 1, 1]
    other = SequenceDB.from_lists([["c", "b", "a"]])  # different vocabulary order
    ps = mine(other, min_support=1, min_length=2)
    again = match(db, ps)
    assert again.names == ps.names
    assert again.names == ["c > b", "c > a", "b > a", "c > b > a"]
    assert again.support_counts[:, 0].tolist() == [1, 0, 0, 0]  # only c > b occurs in db
    assert match(db, []).n_patterns == 0


def test_pattern_explosion_guard_names_the_option():
    rng = np.random.default_rng(0)
    seqs = [[str(x) for x in rng.integers(0, 8, 30)] for _ in range(20)]
    db = SequenceDB.from_lists(seqs)
    with pytest.raises(PatternExplosionError, match="max_patterns.*min_support"):
        mine(db, min_support=0.1, max_length=4, max_patterns=100)


def test_patternset_round_trip(tmp_path):
    db = SequenceDB.from_lists([["a", "b", "a"], ["b", "a"], ["a"]], groups=["x", "y", "y"])
    ps = mine(db, min_support=1, max_gap=1)
    save_patternset(ps, tmp_path / "ps")
    back = load_patternset(tmp_path / "ps")
    assert back.patterns == ps.patterns and back.vocab == ps.vocab
    assert np.array_equal(back.support_counts, ps.support_counts)
    assert (back.counts != ps.counts).nnz == 0
    assert back.constraints["max_gap"] == 1
    table = pd.read_csv(tmp_path / "ps" / "patterns.csv")
    assert list(table.columns) == ["pattern_id", "pattern", "tokens", "length", "support_x", "support_y", "count_x",
                                   "count_y", "instances_x", "instances_y"]
    assert table.equals(pattern_table(ps)) or np.allclose(
        table["support_y"], pattern_table(ps)["support_y"])
    with pytest.raises(DataFileError, match="not a pattern set folder"):
        load_patternset(tmp_path)


# ---------------------------------------------------------------- bad input
def test_bad_input_messages():
    db = SequenceDB.from_lists([["a", "b"], ["b"]])
    with pytest.raises(ParameterError, match="empty"):
        mine(SequenceDB.from_lists([]))
    with pytest.raises(ParameterError, match="no tokens"):
        mine(SequenceDB.from_lists([[], []]))
    for bad in (0, 0.0, 1.5, -0.2, True, "0.1"):
        with pytest.raises(ParameterError, match="min_support"):
            mine(db, min_support=bad)
    with pytest.raises(ParameterError, match="count of 3 sequences.*largest group has 2"):
        mine(db, min_support=3)
    with pytest.raises(ParameterError, match="max_gap"):
        mine(db, max_gap=-1)
    with pytest.raises(ParameterError, match="max_gap"):
        match(db, ["a"], max_gap=-2)
    with pytest.raises(ParameterError, match="max_window.*shorter than 'min_length'"):
        mine(db, min_length=3, max_length=4, max_window=2)
    with pytest.raises(ParameterError, match="max_length"):
        mine(db, min_length=3, max_length=2)
    with pytest.raises(ParameterError, match="not in the vocabulary"):
        match(db, ["a > z"])
    with pytest.raises(ParameterError, match="empty pattern"):
        match(db, [()])
    grouped = SequenceDB.from_lists([["a"]], groups=[-1], group_names=["x", "y"])
    with pytest.raises(ParameterError, match="No sequence belongs to any group"):
        mine(grouped)


# ---------------------------------------------------------------- command line
def _saved_db(tmp_path):
    db = SequenceDB.from_lists([["a", "b", "c"], ["a", "c"], ["b", "c"], ["a", "b"]],
                               groups=["strong", "weak", "weak", "strong"])
    return db, db.save(tmp_path / "db")


def test_cli_mine_writes_pattern_set(tmp_path, capsys):
    db, folder = _saved_db(tmp_path)
    out = tmp_path / "mined"
    code = main(["mine", str(folder), "--out", str(out), "--min-support", "0.5",
                 "--max-length", "2", "--quiet"])
    assert code == 0
    ps = load_patternset(out)
    api = mine_module.mine(db, min_support=0.5, max_length=2)  # the same defaults
    assert ps.patterns == api.patterns
    assert (ps.counts != api.counts).nnz == 0
    meta = json.loads((out / "patternset.json").read_text())
    assert meta["constraints"]["min_support"] == 0.5
    assert "pattern table written to" in capsys.readouterr().out
    # a CSV path: the table under that name, the pattern set beside it
    code = main(["mine", str(folder), "--out", str(tmp_path / "x" / "table.csv"),
                 "--min-support", "2", "--max-gap", "0", "-q"])
    assert code == 0
    assert (tmp_path / "x" / "table.csv").is_file()
    assert load_patternset(tmp_path / "x" / "table.csv").constraints["max_gap"] == 0


@pytest.mark.parametrize("argv, text", [
    (["--min-support", "1.5"], "min_support"),
    (["--min-support", "abc"], "min-support"),
    (["--min-support", "9"], "largest group"),
    (["--max-gap", "-1"], "max_gap"),
    (["--min-length", "3", "--max-window", "2"], "max_window"),
    (["--max-patterns", "2"], "max_patterns"),
])
def test_cli_bad_options_exit_2(tmp_path, capsys, argv, text):
    _, folder = _saved_db(tmp_path)
    code = main(["mine", str(folder), "--out", str(tmp_path / "o"), "-q"] + argv)
    assert code == 2
    err = capsys.readouterr().err
    assert text in err and "Traceback" not in err


def test_cli_missing_database_exit_2(tmp_path, capsys):
    code = main(["mine", str(tmp_path / "nothing"), "--out", str(tmp_path / "o")])
    assert code == 2
    assert "not a sequence database folder" in capsys.readouterr().err


# ------------------------------------------------------- blocks, chunks, options
@pytest.mark.parametrize("cons", [
    {}, {"max_gap": 1}, {"max_window": 4}, {"max_gap": 2, "max_window": 5, "skip_pauses": True},
    {"max_window": 3, "skip_pauses": True}, {"closed": True}, {"maximal": True, "max_gap": 0},
])
def test_blocks_and_chunks_do_not_change_results(monkeypatch, cons):
    import seqmine.mining._kernels as kernels

    rng = np.random.default_rng(7)
    vocab = ["a", "b", "c", "d", "pause:long"]
    seqs = [[vocab[t] for t in rng.integers(0, 5, rng.integers(0, 25))] for _ in range(60)]
    groups = rng.choice(["strong", "weak"], 60).tolist()
    db = SequenceDB.from_lists(seqs, groups=groups, pause_tokens=["pause:long"], vocab=vocab)
    ref = mine(db, min_support=0.2, **cons)
    monkeypatch.setattr(kernels, "_NX_BLOCK_TOKENS", 16)
    monkeypatch.setattr(kernels, "_PLAIN_BLOCK_TOKENS", 16)
    monkeypatch.setattr(kernels, "_EXPAND_CHUNK", 8)
    monkeypatch.setattr(kernels, "_NX_CACHE_BYTES", 0)
    if cons.get("max_window") == 4:  # track minimal windows instead of an implied gap
        monkeypatch.setattr(mine_module, "_IMPLIED_GAP_WINDOW", 0)
    small = mine(db, min_support=0.2, **cons)
    assert small.patterns == ref.patterns
    assert np.array_equal(small.support_counts, ref.support_counts)
    assert (small.counts != ref.counts).nnz == 0
    kw = {k: v for k, v in cons.items() if k in ("max_gap", "max_window", "skip_pauses")}
    again = match(db, ref.patterns[::-1], **kw)
    assert np.array_equal(again.support_counts, ref.support_counts[::-1])
    assert (again.counts != ref.counts[:, ::-1]).nnz == 0


def test_supports_only_option():
    rng = np.random.default_rng(3)
    db = SequenceDB.from_lists([[str(t) for t in rng.integers(0, 4, 12)] for _ in range(30)])
    full = mine(db, min_support=0.3)
    lean = mine(db, min_support=0.3, instance_counts=False)
    assert lean.patterns == full.patterns
    assert np.array_equal(lean.support_counts, full.support_counts)
    assert lean.counts.shape == full.counts.shape and lean.counts.nnz == 0
    assert lean.constraints["instance_counts"] is False


def test_match_repeated_patterns():
    db = SequenceDB.from_lists([["a", "b", "a", "b"], ["b"]], groups=["x", "y"])
    ps = match(db, ["a > b", "b", "a > b"])
    assert ps.counts.toarray().tolist() == [[2, 2, 2], [0, 1, 0]]
    assert ps.support_counts.tolist() == [[1, 0], [1, 1], [1, 0]]


def test_more_than_64_symbols_uses_the_lookup_path():
    # the bit-mask counting holds 64 symbols; larger alphabets take the look-up path
    # (checked against the prefixspan package, a reference only)
    rng = random.Random(11)
    seqs = [[rng.randrange(80) for _ in range(rng.randint(20, 60))] for _ in range(40)]
    ref = PrefixSpan(seqs)
    ref.maxlen = 3
    expected = {tuple(p): sup for sup, p in ref.frequent(6)}
    db = _ints_db(seqs)
    ps = mine(db, min_support=6, max_length=3)
    assert len(set(t for p in ps.patterns for t in p)) > 64
    assert _int_patterns(ps) == expected
    again = match(db, ps.patterns)
    assert (again.counts != ps.counts).nnz == 0


def test_search_statistics_belong_to_their_result():
    # The work counters travel with the result (no module-level state): a second
    # search leaves the first result's counters alone.
    db = _ints_db([[0, 1, 2, 3, 4], [1, 1, 1, 3, 4], [2, 1, 2, 2, 0], [1, 1, 1, 2, 2]])
    first = mine(db, min_support=2, max_length=None)
    before = json.dumps(first.search_stats, sort_keys=True)
    mine(db, min_support=4, max_length=1)
    assert json.dumps(first.search_stats, sort_keys=True) == before
    levels = first.search_stats["levels"]
    assert [lv["frequent"] for lv in levels if lv["frequent"]] == np.bincount(
        first.lengths).tolist()[1:]
    assert first.search_stats["instance_counts"] > 0
    assert match(db, ["1 > 2"]).search_stats["levels"][0]["length"] == 1
