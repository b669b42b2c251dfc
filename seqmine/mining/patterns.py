"""Pattern sets: mined patterns with per-group support and occurrence counts.

Occurrence semantics (shared by the miner, the matcher and the live watcher)
-------------------------------------------------------------------------------
A pattern ``p = (p1, ..., pk)`` *occurs* in a sequence ``s`` at positions
``i1 < i2 < ... < ik`` when ``s[ij] == pj`` for every ``j`` and the constraints hold:

* **gap** -- ``max_gap``: the number of tokens strictly between ``i(j)`` and
  ``i(j+1)`` is at most ``max_gap`` (``0`` = contiguous; ``None`` = unlimited).
  With ``skip_pauses=True`` pause tokens between the two positions are not counted.
* **window** -- ``max_window``: the span ``ik - i1 + 1`` is at most ``max_window``
  tokens (``None`` = unlimited). With ``skip_pauses=True`` the span counts only
  non-pause tokens inside ``[i1, ik]`` (the matched items themselves included).

*Sequence support* of ``p`` in a group is the number (or share) of the group's
sequences in which ``p`` occurs at least once.

*Instance count* of ``p`` in a sequence is the largest number of occurrences whose
spans ``[i1, ik]`` are pairwise disjoint. It is computed by the earliest-end greedy
scan (optimal for disjoint intervals): take the occurrence that ends first, then
the one that ends first among those starting after it, and so on. The scan only
looks forward, so a live watcher computes exactly the same count event by event.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import ParameterError

__all__ = ["PatternSet", "PATTERN_SEPARATOR", "format_pattern", "parse_pattern", "is_subsequence"]

#: Separator between tokens in a pattern's readable name (``a > b > c``).
PATTERN_SEPARATOR = " > "


def format_pattern(pattern, vocab):
    """Readable name of a pattern given as token ids."""
    return PATTERN_SEPARATOR.join(vocab[t] for t in pattern)


def is_subsequence(short, long):
    """True when ``short`` occurs in ``long`` in order, gaps allowed (no constraints).

    Examples
    --------
    >>> is_subsequence(("a", "c"), ("a", "b", "c")), is_subsequence(("c", "a"), ("a", "b", "c"))
    (True, False)
    """
    if len(short) > len(long):
        return False
    it = iter(long)
    return all(any(x == y for y in it) for x in short)


def parse_pattern(text, vocab):
    """Token ids of a readable pattern name; raises ParameterError for unknown tokens."""
    index = {v: i for i, v in enumerate(vocab)}
    out = []
    for part in str(text).split(PATTERN_SEPARATOR):
        name = part.strip()
        if name not in index:
            raise ParameterError(
                f"Pattern {text!r}: token {name!r} is not in the vocabulary; check the "
                f"spelling or re-encode with the same mapping."
            )
        out.append(index[name])
    return tuple(out)


@dataclass
class PatternSet:
    """Mined (or matched) patterns over one SequenceDB.

    Parameters
    ----------
    patterns : list of tuple of int
        Token ids of each pattern, in a deterministic order.
    vocab : list of str
        Vocabulary of the SequenceDB the ids refer to.
    is_pause : ndarray of bool
        Pause flag per vocabulary id.
    group_names : list of str
    group_sizes : ndarray of int, shape (n_groups,)
        Number of sequences in each group.
    support_counts : ndarray of int, shape (n_patterns, n_groups)
        Number of sequences of each group containing the pattern.
    counts : scipy.sparse.csr_matrix, shape (n_sequences, n_patterns)
        Instance count (non-overlapping occurrences) of each pattern per sequence.
    seq_groups : ndarray of int, shape (n_sequences,)
        Group index of each sequence (``-1`` = no group).
    constraints : dict
        The matching constraints (``max_gap``, ``max_window``, ``skip_pauses``, ...)
        and mining thresholds used.
    search_stats : dict, optional
        Work counters of the search that produced the set (blocks, candidates and
        occurrences per level, instance counts), as returned by the private search;
        empty for sets read from a file or assembled from pieces. Not compared and
        not saved.
    """

    patterns: list
    vocab: list
    is_pause: np.ndarray
    group_names: list
    group_sizes: np.ndarray
    support_counts: np.ndarray
    counts: sp.csr_matrix
    seq_groups: np.ndarray
    constraints: dict = field(default_factory=dict)
    search_stats: dict = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self):
        self.patterns = [tuple(int(t) for t in p) for p in self.patterns]
        self.support_counts = np.asarray(self.support_counts, dtype=np.int64).reshape(
            len(self.patterns), len(self.group_names))
        self.group_sizes = np.asarray(self.group_sizes, dtype=np.int64)
        self.seq_groups = np.asarray(self.seq_groups, dtype=np.int64)
        self.counts = sp.csr_matrix(self.counts)
        if self.counts.shape != (len(self.seq_groups), len(self.patterns)):
            raise ParameterError(
                f"PatternSet counts has shape {self.counts.shape}; expected "
                f"({len(self.seq_groups)}, {len(self.patterns)})."
            )

    @property
    def n_patterns(self):
        """Number of patterns."""
        return len(self.patterns)

    @property
    def names(self):
        """Readable pattern names (tokens joined by ``' > '``)."""
        return [format_pattern(p, self.vocab) for p in self.patterns]

    @property
    def lengths(self):
        """Length of each pattern."""
        return np.array([len(p) for p in self.patterns], dtype=np.int64)

    def support_fractions(self):
        """Share of each group's sequences containing each pattern, (n_patterns, n_groups)."""
        sizes = np.maximum(self.group_sizes, 1)
        return self.support_counts / sizes

    def presence(self):
        """Boolean sparse matrix (n_sequences, n_patterns): pattern occurs in sequence."""
        return (self.counts > 0).astype(np.int8).tocsr()

    def select(self, indices):
        """A PatternSet restricted to the patterns ``indices`` (in that order)."""
        idx = np.asarray(indices)
        idx = np.flatnonzero(idx) if idx.dtype == bool else idx.astype(np.int64)
        return PatternSet(
            patterns=[self.patterns[i] for i in idx], vocab=self.vocab, is_pause=self.is_pause,
            group_names=self.group_names, group_sizes=self.group_sizes,
            support_counts=self.support_counts[idx], counts=self.counts[:, idx],
            seq_groups=self.seq_groups, constraints=dict(self.constraints),
        )

    def to_frame(self):
        """Tidy table: ``pattern``, ``length``, ``support_<group>`` (fractions), ``count_<group>``."""
        frac = self.support_fractions()
        data = {"pattern": self.names, "length": self.lengths}
        for g, name in enumerate(self.group_names):
            data[f"support_{name}"] = frac[:, g]
        for g, name in enumerate(self.group_names):
            data[f"count_{name}"] = self.support_counts[:, g]
        return pd.DataFrame(data)

    def __repr__(self):
        return (f"PatternSet(n_patterns={self.n_patterns}, n_sequences={self.counts.shape[0]}, "
                f"groups={self.group_names})")
