"""The encoded sequence database: flat token arrays plus offsets.

A :class:`SequenceDB` holds many symbol sequences in the concatenated form used
by hmmlearn: one flat integer array of tokens and an ``offsets`` array such that
sequence ``i`` is ``tokens[offsets[i]:offsets[i + 1]]``. Every token keeps its
time and the source row of the event it came from, so pattern occurrences can
be traced back to log rows.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._util.checks import check_fraction
from .._util.outdir import open_new
from ..errors import DataFileError, ParameterError

__all__ = ["SequenceDB", "PAUSE_PREFIX", "smallest_int_dtype"]

#: Prefix of pause-token names in the vocabulary (``pause:long`` ...).
#: Pause tokens are also flagged in :attr:`SequenceDB.is_pause`, which is what the
#: code relies on; the prefix only keeps them readable.
PAUSE_PREFIX = "pause:"

_FORMAT_VERSION = 1


def smallest_int_dtype(max_value):
    """Return the smallest signed integer dtype holding ``0..max_value``."""
    for dt in (np.int8, np.int16, np.int32, np.int64):
        if max_value <= np.iinfo(dt).max:
            return np.dtype(dt)
    raise ParameterError(f"Value {max_value} does not fit a 64-bit integer.")


@dataclass
class SequenceDB:
    """Encoded sequences, columnar and compact.

    Parameters
    ----------
    tokens : ndarray of int, shape (n_tokens,)
        Vocabulary ids, all sequences concatenated.
    offsets : ndarray of int64, shape (n_sequences + 1,)
        Sequence ``i`` occupies ``tokens[offsets[i]:offsets[i+1]]``.
    vocab : list of str
        Token id -> readable name. Pause tokens are named ``pause:<bin>``.
    is_pause : ndarray of bool, shape (n_vocab,)
        True for pause tokens.
    times : ndarray of float64, shape (n_tokens,)
        Time in seconds of the event; a pause token carries the time of the event
        the pause follows.
    source_rows : ndarray of int64, shape (n_tokens,)
        Source row number (1 = first data record of the events file) of the event;
        a pause token carries the row of the event the pause follows.
    learners : ndarray of str, shape (n_sequences,)
        Learner identifier of each sequence.
    sessions : ndarray of str, shape (n_sequences,)
        Session identifier of each sequence (``""`` when sequences are learners).
    groups : ndarray of int, shape (n_sequences,)
        Index into ``group_names``; ``-1`` means the learner has no group.
    group_names : list of str
        Names of the outcome groups, e.g. ``["strong", "weak"]``.
    encoding : dict
        Plain-data parameters that reproduce the encoding (template, mapping,
        pause bin edges, repeat collapsing ...). Detectors copy it so live events
        are tokenised exactly as offline.

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b"], ["b", "a", "b"]], groups=["x", "y"])
    >>> db.n_sequences, db.n_tokens
    (2, 5)
    >>> db.decode(1)
    ['b', 'a', 'b']
    """

    tokens: np.ndarray
    offsets: np.ndarray
    vocab: list
    is_pause: np.ndarray
    times: np.ndarray
    source_rows: np.ndarray
    learners: np.ndarray
    sessions: np.ndarray
    groups: np.ndarray
    group_names: list
    encoding: dict = field(default_factory=dict)

    def __post_init__(self):
        self.offsets = np.asarray(self.offsets, dtype=np.int64)
        self.tokens = np.asarray(self.tokens)
        if self.tokens.dtype.kind not in "iu":
            raise ParameterError("SequenceDB tokens must be an integer array.")
        self.is_pause = np.asarray(self.is_pause, dtype=bool)
        self.times = np.asarray(self.times, dtype=np.float64)
        self.source_rows = np.asarray(self.source_rows, dtype=np.int64)
        self.learners = np.asarray(self.learners, dtype=object).astype(str)
        self.sessions = np.asarray(self.sessions, dtype=object).astype(str)
        self.groups = np.asarray(self.groups, dtype=np.int64)
        self.vocab = [str(v) for v in self.vocab]
        self.group_names = [str(g) for g in self.group_names]
        n = len(self.offsets) - 1
        if n < 0 or self.offsets[0] != 0 or self.offsets[-1] != len(self.tokens):
            raise ParameterError(
                f"SequenceDB offsets must start at 0 and end at n_tokens={len(self.tokens)}."
            )
        if np.any(np.diff(self.offsets) < 0):
            raise ParameterError("SequenceDB offsets must be non-decreasing.")
        for name in ("times", "source_rows"):
            if len(getattr(self, name)) != len(self.tokens):
                raise ParameterError(f"SequenceDB {name} must have one entry per token.")
        for name in ("learners", "sessions", "groups"):
            if len(getattr(self, name)) != n:
                raise ParameterError(f"SequenceDB {name} must have one entry per sequence.")
        if len(self.is_pause) != len(self.vocab):
            raise ParameterError("SequenceDB is_pause must have one entry per vocabulary token.")
        if len(self.tokens) and (self.tokens.min() < 0 or self.tokens.max() >= len(self.vocab)):
            raise ParameterError(
                f"Largest token id is {int(self.tokens.max())} but the vocabulary has "
                f"{len(self.vocab)} entries."
            )
        if np.any(self.groups >= len(self.group_names)) or np.any(self.groups < -1):
            raise ParameterError("SequenceDB groups must be -1 or an index into group_names.")

    # ------------------------------------------------------------------ sizes
    @property
    def n_sequences(self):
        """Number of sequences."""
        return len(self.offsets) - 1

    @property
    def n_tokens(self):
        """Total number of tokens over all sequences."""
        return len(self.tokens)

    @property
    def n_groups(self):
        """Number of outcome groups."""
        return len(self.group_names)

    @property
    def lengths(self):
        """Length of each sequence (int64 array)."""
        return np.diff(self.offsets)

    @property
    def seq_index(self):
        """Sequence index of every token (int64 array of length ``n_tokens``)."""
        return np.repeat(np.arange(self.n_sequences, dtype=np.int64), self.lengths)

    @property
    def action_mask(self):
        """True for tokens that are actions (not pauses)."""
        return ~self.is_pause[self.tokens]

    def token_id(self, name):
        """Vocabulary id of ``name``; raises ``KeyError`` naming the token."""
        try:
            return self.vocab.index(name)
        except ValueError:
            raise KeyError(f"token {name!r} is not in the vocabulary") from None

    def group_sizes(self):
        """Number of sequences in each group (array of length ``n_groups``)."""
        g = self.groups[self.groups >= 0]
        return np.bincount(g, minlength=self.n_groups)

    # ------------------------------------------------------------- accessors
    def sequence(self, i):
        """Token ids of sequence ``i``."""
        return self.tokens[self.offsets[i]: self.offsets[i + 1]]

    def decode(self, i):
        """Token names of sequence ``i``."""
        return [self.vocab[t] for t in self.sequence(i)]

    def to_lists(self):
        """All sequences as lists of token ids."""
        return [self.sequence(i).tolist() for i in range(self.n_sequences)]

    # ---------------------------------------------------------- derivations
    def subset(self, indices):
        """A new SequenceDB with the sequences ``indices`` (in that order).

        The vocabulary and groups are kept, so token ids stay comparable.
        """
        idx = np.asarray(indices)
        idx = np.flatnonzero(idx) if idx.dtype == bool else idx.astype(np.int64)
        lens = self.lengths[idx]
        new_off = np.zeros(len(idx) + 1, dtype=np.int64)
        np.cumsum(lens, out=new_off[1:])
        take = _ranges(self.offsets[idx], lens)
        return SequenceDB(
            tokens=self.tokens[take],
            offsets=new_off,
            vocab=list(self.vocab),
            is_pause=self.is_pause.copy(),
            times=self.times[take],
            source_rows=self.source_rows[take],
            learners=self.learners[idx],
            sessions=self.sessions[idx],
            groups=self.groups[idx],
            group_names=list(self.group_names),
            encoding=dict(self.encoding),
        )

    def with_groups(self, groups, group_names):
        """A copy whose sequences carry new group labels (vocabulary unchanged)."""
        return SequenceDB(
            tokens=self.tokens, offsets=self.offsets, vocab=list(self.vocab),
            is_pause=self.is_pause, times=self.times, source_rows=self.source_rows,
            learners=self.learners, sessions=self.sessions,
            groups=np.asarray(groups, dtype=np.int64), group_names=list(group_names),
            encoding=dict(self.encoding),
        )

    def cut(self, fraction):
        """Keep the first ``fraction`` of each sequence's *action* events.

        The cut counts action tokens (events), not pause tokens: with ``fraction``
        0.3 a sequence with 10 events keeps its first ``ceil(0.3 * 10) = 3`` events
        and the pause tokens between them; the pause after the last kept event is
        dropped, because the next event has not happened yet at that point.

        Parameters
        ----------
        fraction : float in (0, 1]

        Returns
        -------
        SequenceDB
        """
        fraction = check_fraction(fraction, "fraction", "SequenceDB.cut")
        act = self.action_mask.astype(np.int64)
        seq = self.seq_index
        # running count of actions within each sequence, at each token
        csum = np.cumsum(act)
        start_cum = np.concatenate([[0], csum])[self.offsets[:-1]]
        within = csum - start_cum[seq]
        n_act = np.bincount(seq, weights=act, minlength=self.n_sequences).astype(np.int64)
        keep_n = np.ceil(np.round(fraction * n_act, 9)).astype(np.int64)
        keep_n = np.minimum(np.maximum(keep_n, np.minimum(n_act, 1)), n_act)
        is_act = act.astype(bool)
        # keep an action if it is among the first keep_n; keep a pause if a later
        # kept action follows it, i.e. the number of actions before it < keep_n
        keep = np.where(is_act, within <= keep_n[seq], within < keep_n[seq])
        lens = np.bincount(seq[keep], minlength=self.n_sequences)
        new_off = np.zeros(self.n_sequences + 1, dtype=np.int64)
        np.cumsum(lens, out=new_off[1:])
        return SequenceDB(
            tokens=self.tokens[keep], offsets=new_off, vocab=list(self.vocab),
            is_pause=self.is_pause.copy(), times=self.times[keep],
            source_rows=self.source_rows[keep], learners=self.learners.copy(),
            sessions=self.sessions.copy(), groups=self.groups.copy(),
            group_names=list(self.group_names), encoding=dict(self.encoding),
        )

    # ----------------------------------------------------------- construction
    @classmethod
    def from_lists(cls, sequences, *, groups=None, group_names=None, pause_tokens=(),
                   learners=None, vocab=None):
        """Build a SequenceDB from lists of token names (for tests and examples).

        Parameters
        ----------
        sequences : list of list of str
        groups : list of str or int, optional
            Group name (or index into ``group_names``) of each sequence.
        group_names : list of str, optional
            Defaults to the sorted distinct names in ``groups``.
        pause_tokens : iterable of str
            Names that are pause tokens.
        learners : list of str, optional
            Defaults to ``"L0", "L1", ...``.
        vocab : list of str, optional
            Fixed vocabulary order; defaults to first appearance order.
        """
        pause_tokens = set(pause_tokens)
        if vocab is None:
            vocab = []
            seen = set()
            for s in sequences:
                for t in s:
                    if t not in seen:
                        seen.add(t)
                        vocab.append(t)
        index = {t: i for i, t in enumerate(vocab)}
        flat = [index[t] for s in sequences for t in s]
        lens = [len(s) for s in sequences]
        offsets = np.zeros(len(sequences) + 1, dtype=np.int64)
        np.cumsum(lens, out=offsets[1:])
        n = len(sequences)
        if groups is None:
            gi = np.full(n, -1, dtype=np.int64)
            group_names = list(group_names or [])
        else:
            if group_names is None:
                group_names = sorted({g for g in groups if isinstance(g, str)})
            gidx = {g: i for i, g in enumerate(group_names)}
            gi = np.array([g if isinstance(g, (int, np.integer)) else gidx[g] for g in groups],
                          dtype=np.int64)
        n_tok = len(flat)
        return cls(
            tokens=np.array(flat, dtype=smallest_int_dtype(max(len(vocab), 1))),
            offsets=offsets,
            vocab=list(vocab),
            is_pause=np.array([t in pause_tokens for t in vocab], dtype=bool),
            times=np.arange(n_tok, dtype=np.float64),
            source_rows=np.arange(1, n_tok + 1, dtype=np.int64),
            learners=np.array(learners if learners is not None else [f"L{i}" for i in range(n)],
                              dtype=object),
            sessions=np.array([""] * n, dtype=object),
            groups=gi,
            group_names=list(group_names),
        )

    # -------------------------------------------------------------- storage
    def save(self, folder):
        """Write the database to ``folder`` (created if needed).

        Arrays go to ``arrays.npz`` (plain arrays, loaded with allow_pickle=False); names and parameters to
        ``sequences.json``. :meth:`load` restores an equal object.
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        with open_new(folder / "arrays.npz", "wb") as fh:
            np.savez_compressed(
                fh, tokens=self.tokens, offsets=self.offsets, is_pause=self.is_pause,
                times=self.times, source_rows=self.source_rows, groups=self.groups,
            )
        meta = {
            "format": "seqmine-sequencedb",
            "version": _FORMAT_VERSION,
            "vocab": self.vocab,
            "group_names": self.group_names,
            "learners": self.learners.tolist(),
            "sessions": self.sessions.tolist(),
            "encoding": self.encoding,
        }
        with open_new(folder / "sequences.json") as fh:
            fh.write(json.dumps(meta, indent=1, sort_keys=True, ensure_ascii=False))
        return folder

    @classmethod
    def load(cls, folder):
        """Read a database written by :meth:`save`."""
        folder = Path(folder)
        meta_path = folder / "sequences.json"
        arr_path = folder / "arrays.npz"
        if not meta_path.is_file() or not arr_path.is_file():
            raise DataFileError(
                f"{folder}: not a sequence database folder (needs sequences.json and "
                f"arrays.npz); create one with 'seqmine encode'."
            )
        try:
            meta = json.loads(meta_path.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise DataFileError(f"{meta_path}: unreadable JSON ({exc}); re-run 'seqmine encode'.") from None
        if meta.get("format") != "seqmine-sequencedb" or meta.get("version") != _FORMAT_VERSION:
            raise DataFileError(
                f"{meta_path}: unsupported sequence database version {meta.get('version')!r} "
                f"(this seqmine reads version {_FORMAT_VERSION}); re-run 'seqmine encode'."
            )
        with np.load(arr_path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
        return cls(
            tokens=arrays["tokens"], offsets=arrays["offsets"], vocab=meta["vocab"],
            is_pause=arrays["is_pause"], times=arrays["times"],
            source_rows=arrays["source_rows"],
            learners=np.array(meta["learners"], dtype=object),
            sessions=np.array(meta["sessions"], dtype=object),
            groups=arrays["groups"], group_names=meta["group_names"],
            encoding=meta.get("encoding", {}),
        )

    def equals(self, other):
        """True if both databases hold the same sequences, names and parameters."""
        return (
            isinstance(other, SequenceDB)
            and np.array_equal(self.tokens, other.tokens)
            and np.array_equal(self.offsets, other.offsets)
            and self.vocab == other.vocab
            and np.array_equal(self.is_pause, other.is_pause)
            and np.array_equal(self.times, other.times)
            and np.array_equal(self.source_rows, other.source_rows)
            and np.array_equal(self.learners, other.learners)
            and np.array_equal(self.sessions, other.sessions)
            and np.array_equal(self.groups, other.groups)
            and self.group_names == other.group_names
            and self.encoding == other.encoding
        )

    def __repr__(self):
        return (f"SequenceDB(n_sequences={self.n_sequences}, n_tokens={self.n_tokens}, "
                f"n_vocab={len(self.vocab)}, groups={self.group_names})")


def _ranges(starts, lengths):
    """Concatenate ``arange(s, s + l)`` for each start/length pair, vectorised."""
    lengths = np.asarray(lengths, dtype=np.int64)
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    starts = np.asarray(starts, dtype=np.int64)
    nz = lengths > 0
    starts, lengths = starts[nz], lengths[nz]
    out = np.ones(total, dtype=np.int64)
    pos = np.cumsum(lengths)[:-1]
    out[0] = starts[0]
    out[pos] = starts[1:] - (starts[:-1] + lengths[:-1] - 1)
    return np.cumsum(out)
