"""Partitioned mining and batched permutations equal the serial run (in-process and local processes)."""

import numpy as np
import pytest
from _parallel_helpers import _random_db, assert_same_patternset  # noqa: F401
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError, PatternExplosionError
from seqmine.mining.partitions import _partition_first_items

from _unconstrained import mine, mine_parallel  # noqa: I001  (tests/ helper)


def test_first_items_restricts_the_first_item_only():
    db = SequenceDB.from_lists([["a", "b", "c"], ["a", "c"], ["b", "c"]])
    full = mine(db, min_support=2, max_length=3)
    only_b = mine(db, min_support=2, max_length=3, first_items=["b"])
    # hand-derived: the frequent patterns starting with b are 'b' and 'b > c'
    assert only_b.names == ["b", "b > c"]
    assert set(only_b.names) == {n for n in full.names if n.split(" > ")[0] == "b"}
    b_id = db.vocab.index("b")
    assert mine(db, min_support=2, max_length=3, first_items=[b_id]).names == only_b.names
    with pytest.raises(ParameterError, match="'first_items'.*'z'.*not in the vocabulary"):
        mine(db, min_support=2, first_items=["z"])


def test_partitions_cover_each_present_token_once():
    db = _random_db(np.random.default_rng(3), n_sym=7)
    parts = _partition_first_items(db, 3)
    flat = sorted(t for p in parts for t in p)
    assert flat == sorted(np.unique(db.tokens).tolist())
    assert len(parts) == 3


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), parts=st.integers(2, 6),
       min_support=st.sampled_from([0.2, 0.4, 2]), min_length=st.integers(1, 3),
       max_gap=st.sampled_from([None, 0, 1]), max_window=st.sampled_from([None, 4]),
       flags=st.tuples(st.booleans(), st.booleans(), st.booleans(), st.booleans(),
                       st.booleans()))
def test_partitioned_mining_equals_serial(seed, parts, min_support, min_length, max_gap,
                                          max_window, flags):
    skip, start, end, closed, maximal = flags
    db = _random_db(np.random.default_rng(seed))
    kw = dict(min_support=min_support, min_length=min_length, max_length=4, max_gap=max_gap,
              max_window=max_window, skip_pauses=skip, start_with_action=start,
              end_with_action=end, closed=closed, maximal=maximal)
    assert_same_patternset(mine_parallel(db, partitions=parts, **kw), mine(db, **kw))


def test_pattern_limit_counts_every_frequent_pattern_like_the_serial_miner():
    db = _random_db(np.random.default_rng(5))
    n_all = mine(db, min_support=0.2, max_length=3).n_patterns
    # the serial miner counts short patterns toward the limit even when not reported
    with pytest.raises(PatternExplosionError, match="max_patterns"):
        mine(db, min_support=0.2, min_length=3, max_length=3, max_patterns=n_all - 1)
    with pytest.raises(PatternExplosionError, match="max_patterns"):
        mine_parallel(db, min_support=0.2, min_length=3, max_length=3,
                      max_patterns=n_all - 1, partitions=3)
    ok = mine_parallel(db, min_support=0.2, min_length=3, max_length=3, max_patterns=n_all,
                       partitions=3)
    assert_same_patternset(ok, mine(db, min_support=0.2, min_length=3, max_length=3,
                                    max_patterns=n_all))


def test_local_processes_equal_serial():
    db = _random_db(np.random.default_rng(11), n_seq=200, n_sym=6)
    kw = dict(min_support=0.1, max_length=4, skip_pauses=True, closed=True)
    assert_same_patternset(mine_parallel(db, n_jobs=2, **kw), mine(db, **kw))


# ------------------------------------------------------------ permutation batches
def _presence_problem(seed, n=60, m=25):
    import scipy.sparse as sp
    rng = np.random.default_rng(seed)
    labels = rng.integers(0, 2, size=n)
    labels[:2] = [0, 1]
    x = sp.csr_matrix(rng.poisson(0.6, size=(n, m)).astype(float))
    return x, labels


@pytest.mark.parametrize("jobs", [2, 3])
def test_permutation_chunks_equal_the_serial_stream_in_process(monkeypatch, jobs):
    # the chunked path with an in-process map: the union of the chunks is the serial stream
    import seqmine._util.parallel as par
    from seqmine.scoring.permutation import westfall_young_minp, westfall_young_rates
    monkeypatch.setattr(par, "parallel_map",
                        lambda f, items, n_jobs=1, scheduler=None: [f(x) for x in items])
    x, labels = _presence_problem(4)
    for fn in (westfall_young_minp, westfall_young_rates):
        raw_s, adj_s = fn(x, labels, n_permutations=97, random_state=7, batch_size=10)
        raw_p, adj_p = fn(x, labels, n_permutations=97, random_state=7, batch_size=13, n_jobs=jobs)
        np.testing.assert_array_equal(raw_s, raw_p)
        np.testing.assert_array_equal(adj_s, adj_p)


def test_contrast_westfall_young_in_local_processes_equals_serial():
    from seqmine.scoring.contrast import contrast
    db = _random_db(np.random.default_rng(8), n_seq=80, n_sym=5)
    ps = mine(db, min_support=0.1, max_length=3)
    kw = dict(correction="westfall-young", n_permutations=120, random_state=3, n_bootstrap=5)
    serial = contrast(ps, db, **kw)
    parallel = contrast(ps, db, n_jobs=2, **kw)
    assert serial.equals(parallel)
    assert serial["q_value"].notna().all()


def test_scheduler_flag_reaches_the_configuration():
    from seqmine.cli.commands.analyze import config_from_args
    from seqmine.cli.main import build_parser
    args = build_parser().parse_args(["analyze", "ev.csv", "--outcomes", "oc.csv", "--out", "o",
                                      "--jobs", "2", "--scheduler", "tcp://10.0.0.5:8786"])
    cfg = config_from_args(args)
    assert cfg["scheduler"] == "tcp://10.0.0.5:8786" and cfg["n_jobs"] == 2
    args = build_parser().parse_args(["analyze", "ev.csv", "--outcomes", "oc.csv", "--out", "o"])
    assert config_from_args(args)["scheduler"] is None


def test_large_data_samples_are_seeded_ordered_and_optional():
    import pandas as pd

    from seqmine.pipeline import _sample_learners, _sample_sequences
    db = _random_db(np.random.default_rng(1), n_seq=50)
    assert _sample_sequences(db, None, 3) is db and _sample_sequences(db, 50, 3) is db
    a, b = _sample_sequences(db, 20, 3), _sample_sequences(db, 20, 3)
    assert a.n_sequences == 20 and a.decode(0) == b.decode(0)
    idx = [int(s[1:]) for s in a.learners]     # learners are named L0, L1, ...
    assert idx == sorted(idx) and len(set(idx)) == 20
    ev = pd.DataFrame({"learner": np.repeat([f"L{i:02d}" for i in range(30)], 3),
                       "time": np.tile([1.0, 2.0, 3.0], 30)})
    oc = pd.DataFrame({"learner": [f"L{i:02d}" for i in range(30)], "score": np.arange(30.0)})
    e1, o1 = _sample_learners(ev, oc, 10, 5)
    e2, _ = _sample_learners(ev, oc, 10, 5)
    assert e1["learner"].nunique() == 10 and len(e1) == 30
    assert set(o1["learner"]) == set(e1["learner"]) and e1.equals(e2)
    assert e1["learner"].is_monotonic_increasing   # original order kept
    assert _sample_learners(ev, oc, None, 5)[0] is ev


def test_scheduler_must_be_an_address():
    from seqmine._util.parallel import using_scheduler
    with pytest.raises(ParameterError, match="'scheduler' option must be a Dask address"):
        with using_scheduler(8786):
            pass
