"""Shared helpers of the parallel-execution tests: random databases, PatternSet equality."""

import numpy as np

from seqmine.encoding.sequences import SequenceDB


def assert_same_patternset(a, b):
    """Every field of two PatternSets is equal (patterns, order, supports, counts, constraints)."""
    assert a.patterns == b.patterns
    assert a.vocab == b.vocab
    np.testing.assert_array_equal(a.support_counts, b.support_counts)
    np.testing.assert_array_equal(a.group_sizes, b.group_sizes)
    np.testing.assert_array_equal(a.seq_groups, b.seq_groups)
    assert a.group_names == b.group_names
    assert a.constraints == b.constraints
    assert a.counts.shape == b.counts.shape
    assert a.counts.dtype == b.counts.dtype
    assert (a.counts != b.counts).nnz == 0


def _random_db(rng, n_seq=30, n_sym=5, pauses=True):
    vocab = [chr(97 + i) for i in range(n_sym)] + (["pause:long"] if pauses else [])
    seqs = [list(rng.choice(vocab, size=int(rng.integers(1, 12)))) for _ in range(n_seq)]
    groups = ["x" if i % 2 else "y" for i in range(n_seq)]
    return SequenceDB.from_lists(seqs, groups=groups,
                                 pause_tokens=["pause:long"] if pauses else [])
