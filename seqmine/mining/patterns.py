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

import hashlib
import json
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import ParameterError

__all__ = ["PatternSet", "PATTERN_SEPARATOR", "format_pattern", "parse_pattern", "pattern_id",
           "tokens_text", "parse_tokens", "pattern_tokens", "split_readable", "is_subsequence"]

#: Separator between tokens in a pattern's readable name (``a > b > c``).
PATTERN_SEPARATOR = " > "


def format_pattern(pattern, vocab):
    """Readable name of a pattern given as token ids."""
    return PATTERN_SEPARATOR.join(vocab[t] for t in pattern)


def pattern_id(tokens):
    """Stable identifier of a pattern given as its token names.

    ``P`` + the first 16 hex digits of the SHA-256 of the token list as compact JSON:
    the same tokens give the same id in every run and every file, whatever the tokens
    contain (`` > ``, quotes, commas, leading ``=``).

    Examples
    --------
    >>> pattern_id(["a > b", "c"]) == pattern_id(["a", "b", "c"])
    False
    >>> pattern_id(["set_light", "measure"]) == pattern_id(("set_light", "measure"))
    True
    """
    digest = hashlib.sha256(tokens_text(tokens).encode("utf-8")).hexdigest()
    return "P" + digest[:16]


def tokens_text(tokens):
    """The exact, unambiguous text form of a token list: compact JSON.

    Examples
    --------
    >>> print(tokens_text(["a > b", "c,d"]))
    ["a > b","c,d"]
    """
    return json.dumps([str(t) for t in tokens], ensure_ascii=False, separators=(",", ":"))


def parse_tokens(text):
    """Token list of :func:`tokens_text` output (or of a list already); ParameterError
    if it is not a JSON list of strings.

    Examples
    --------
    >>> parse_tokens('["a > b","c"]')
    ['a > b', 'c']
    """
    if isinstance(text, (list, tuple)):
        items = list(text)
    else:
        try:
            items = json.loads(str(text))
        except ValueError:
            items = None
    if not isinstance(items, list) or not items or not all(isinstance(t, str) for t in items):
        raise ParameterError(f"Pattern tokens {str(text)[:80]!r} are not a JSON list of token "
                             f"names such as [\"a\", \"b\"]; write the table again with "
                             f"'seqmine contrast'.")
    return items


def pattern_tokens(row, known=None):
    """Tokens of one pattern-table row (a mapping): from its ``tokens`` column when
    present (exact), else by splitting ``pattern`` at `` > `` (for tables written before
    token lists; a token containing `` > `` is recognised when ``known`` lists it)."""
    tokens = row.get("tokens") if hasattr(row, "get") else None
    if isinstance(tokens, (list, tuple)) or (isinstance(tokens, str) and tokens.strip()):
        return parse_tokens(tokens)
    return split_readable(row["pattern"], known)


def split_readable(text, known=None):
    """Tokens of a readable pattern ``"a > b"``; with ``known`` token names, a name that
    itself contains the separator is recognised (the shortest split into known names)."""
    if isinstance(text, (list, tuple)):
        return [str(t) for t in text]
    pieces = str(text).split(PATTERN_SEPARATOR)
    if known:
        seg = _segment(pieces, known)
        if seg is not None:
            return seg
    parts = [p.strip() for p in pieces]
    if not parts or any(p == "" for p in parts):
        raise ParameterError(f"Pattern {text!r} has an empty token; patterns are token names "
                             f"joined by {PATTERN_SEPARATOR!r}.")
    return parts


def _segment(pieces, known):
    """Split ``pieces`` (the text cut at every separator) into known tokens, or None."""
    n = len(pieces)
    best = [None] * (n + 1)  # best[i]: a segmentation of pieces[i:]
    best[n] = []
    for i in range(n - 1, -1, -1):
        for j in range(i + 1, n + 1):
            tok = PATTERN_SEPARATOR.join(pieces[i:j])
            if tok in known and best[j] is not None:
                best[i] = [tok] + best[j]
                break
    return best[0]


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
    def tokens(self):
        """Token names of each pattern (lists)."""
        return [[self.vocab[t] for t in p] for p in self.patterns]

    @property
    def ids(self):
        """Stable identifier of each pattern (:func:`pattern_id`)."""
        return [pattern_id(t) for t in self.tokens]

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
        """Tidy table: ``pattern_id``, ``pattern``, ``tokens`` (JSON list), ``length``,
        ``support_<group>`` (fractions), ``count_<group>``."""
        frac = self.support_fractions()
        toks = self.tokens
        data = {"pattern_id": [pattern_id(t) for t in toks], "pattern": self.names,
                "tokens": [tokens_text(t) for t in toks], "length": self.lengths}
        for g, name in enumerate(self.group_names):
            data[f"support_{name}"] = frac[:, g]
        for g, name in enumerate(self.group_names):
            data[f"count_{name}"] = self.support_counts[:, g]
        return pd.DataFrame(data)

    def __repr__(self):
        return (f"PatternSet(n_patterns={self.n_patterns}, n_sequences={self.counts.shape[0]}, "
                f"groups={self.group_names})")
