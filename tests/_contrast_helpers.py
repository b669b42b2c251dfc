"""Shared test helpers: brute-force pattern sets over small greenhouse-like databases."""

import numpy as np
import scipy.sparse as sp

from seqmine.encoding.sequences import SequenceDB
from seqmine.mining.patterns import PatternSet

ACTIONS = ["set_light", "set_water", "advance_week", "measure_height", "reset", "paint_pot",
           "pause:long"]


def _instances(seq, pat):
    """Brute-force instance count (unlimited gap): earliest-end greedy, disjoint spans."""
    count, start = 0, 0
    while True:
        pos, k = start, 0
        while pos < len(seq) and k < len(pat):
            if seq[pos] == pat[k]:
                k += 1
            pos += 1
        if k < len(pat):
            return count
        count += 1
        start = pos


def brute_patternset(db, patterns):
    """PatternSet of the given token-name patterns counted by brute force on db."""
    ids = [tuple(db.vocab.index(t) for t in p) for p in patterns]
    counts = np.array([[_instances(db.sequence(i).tolist(), p) for p in ids]
                       for i in range(db.n_sequences)], dtype=np.int64)
    counts = counts.reshape(db.n_sequences, len(ids))
    sup = np.stack([(counts[db.groups == g] > 0).sum(axis=0) for g in range(db.n_groups)], axis=1)
    return PatternSet(patterns=ids, vocab=db.vocab, is_pause=db.is_pause,
                      group_names=db.group_names, group_sizes=db.group_sizes(),
                      support_counts=sup, counts=sp.csr_matrix(counts), seq_groups=db.groups)


def random_db(n=40, seed=0, n_groups=2, planted=True):
    """Random greenhouse-like sequences; 'strong' learners more often measure after advancing."""
    rng = np.random.default_rng(seed)
    names = ["strong", "weak", "middle"][:n_groups]
    groups = [names[i % n_groups] for i in range(n)]
    seqs = []
    for g in groups:
        length = int(rng.integers(4, 14))
        p = np.ones(len(ACTIONS))
        if planted and g == "strong":
            p[3] = 4.0
        if planted and g == "weak":
            p[4] = 3.0
        seqs.append(list(rng.choice(ACTIONS, size=length, p=p / p.sum())))
    return SequenceDB.from_lists(seqs, groups=groups, group_names=names,
                                 pause_tokens=["pause:long"], vocab=ACTIONS)


PATTERNS = [("measure_height",), ("reset",), ("advance_week", "measure_height"),
            ("set_light", "advance_week"), ("reset", "reset"), ("paint_pot",),
            ("set_water", "pause:long"), ("set_light", "advance_week", "measure_height")]
