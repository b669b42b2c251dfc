"""Frequent ordered patterns by bulk prefix projection, with per-group support.

The miner follows PrefixSpan (Pei et al. 2001): a pattern is grown one item at a
time from the occurrences of its prefix. Here each level of the prefix tree is
processed as a whole -- every occurrence of every prefix of one length sits in one
set of numpy arrays -- so no Python code runs per pattern or per sequence.

Semantics of occurrence, gap, window, pause skipping and instance counts are the
ones documented in :mod:`seqmine.mining.patterns`. A pattern is *kept* when it is frequent
in at least one group: ``support_count[g] / group_size[g] >= min_support`` (or
``support_count[g] >= min_support`` for an integer count) for some group ``g``.
A database without groups is treated as one group named ``"all"``.

Output order (deterministic): by length, then by last item, then by the item
before it, and so on (vocabulary ids) -- the order in which the level-wise search
numbers the patterns of a level (every new pattern is numbered by its last item
first, then by its prefix's number), so no sort is needed.
"""

from __future__ import annotations

import itertools
import json
import numbers
import warnings
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from .._util.checks import check_int
from .._util.csvio import write_csv
from .._util.jsonio import json_default
from .._util.outdir import open_new
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import DataFileError, ParameterError, SeqmineWarning
from ._search import assemble_counts, build_trie, node_offsets, search
from .patterns import PatternSet, is_subsequence, parse_pattern

__all__ = ["mine", "match", "pattern_table", "save_patternset", "load_patternset",
           "DEFAULT_MAX_PATTERNS"]

#: Default limit on the number of frequent patterns before mining stops.
DEFAULT_MAX_PATTERNS = DEFAULT_CONFIG["mine"]["max_patterns"]
#: Defaults of the mining options (the ``[mine]`` section of the configuration).
_DEFAULTS = DEFAULT_CONFIG["mine"]

_PS_FORMAT = "seqmine-patternset"
_PS_VERSION = 1
#: Windows up to this many tokens run in the gap mode with the implied gap.
_IMPLIED_GAP_WINDOW = 16
#: Pattern lengths up to which closed/maximal filtering enumerates sub-patterns in bulk.
_MAX_BULK_SUBSET_LENGTH = 12


def mine(db, *, min_support=_DEFAULTS["min_support"], min_length=_DEFAULTS["min_length"],
         max_length=_DEFAULTS["max_length"], max_gap=_DEFAULTS["max_gap"],
         max_window=_DEFAULTS["max_window"], skip_pauses=_DEFAULTS["skip_pauses"],
         start_with_action=_DEFAULTS["start_with_action"],
         end_with_action=_DEFAULTS["end_with_action"], closed=_DEFAULTS["closed"],
         maximal=_DEFAULTS["maximal"], max_patterns=DEFAULT_MAX_PATTERNS,
         instance_counts=True, first_items=None, support_unit=_DEFAULTS["support_unit"]):
    """Mine ordered patterns that are frequent in at least one group.

    Parameters
    ----------
    db : SequenceDB
    min_support : float in (0, 1] or int >= 1
        A float is a share of a group's sequences (or learners, see ``support_unit``);
        an int is a number of them. A pattern is kept when some group reaches it.
    support_unit : {"sequence", "learner"}, default "sequence"
        What ``min_support`` counts. ``"sequence"``: the group's sequences.
        ``"learner"``: the learners of a group with the pattern in at least one of their
        sequences, so a behaviour learners show in one of many sessions is not missed,
        and a learner with many sessions counts once. The two agree when each learner
        has one sequence. Either way ``support_counts`` holds sequence supports.
    min_length, max_length : int
        Pattern lengths reported (``max_length=None``: no upper limit).
    max_gap : int >= 0, optional
        Most tokens allowed between consecutive items (0 = contiguous).
    max_window : int >= 1, optional
        Largest span of an occurrence in tokens; must be >= ``min_length``.
    skip_pauses : bool
        Pause tokens do not count toward gaps and windows.
    start_with_action, end_with_action : bool
        Report only patterns whose first (last) item is an action, not a pause.
    closed : bool
        Drop a pattern when a reported super-pattern (containing it as a
        subsequence) has the identical per-group support vector.
    maximal : bool
        Drop a pattern when any reported pattern contains it as a subsequence.
    first_items : sequence of int or str, optional
        Only patterns whose first item is one of these (token ids or names) are
        searched; used to split mining into independent partitions (see
        :func:`seqmine.mining.partitions.mine_parallel`). Closed/maximal filtering then
        only sees the partition's patterns.
    max_patterns : int
        Stop with :class:`~seqmine.errors.PatternExplosionError` when more frequent
        patterns than this are found.
    instance_counts : bool
        Compute the sequences x patterns instance-count matrix (default). With
        False only patterns and supports are mined (faster); the matrix is then
        left empty and ``constraints["instance_counts"]`` is False.

    Returns
    -------
    PatternSet
        Patterns ordered by length, then by last item, item before it, ... (vocabulary
        ids; see the module docstring); per-group sequence
        support; a sparse sequences x patterns matrix of instance counts
        (earliest-end greedy, non-overlapping spans).

    Notes
    -----
    Level ``k + 1`` candidates are ``p + s`` where ``p[1:] + s`` is frequent at level
    ``k`` (valid under gap and window constraints, because dropping the first item
    keeps every gap and shrinks the span) and, without a gap limit, ``p[:-1] + s`` is
    frequent too. Since "frequent in at least one group" is anti-monotone, this
    pruning is exact.

    References
    ----------
    J. Pei, J. Han, B. Mortazavi-Asl, H. Pinto, Q. Chen, U. Dayal, M.-C. Hsu,
    "PrefixSpan: Mining sequential patterns efficiently by prefix-projected pattern
    growth", ICDE 2001.

    Examples
    --------
    The defaults (those of ``seqmine analyze``) look for contiguous runs of 2 to 4
    items:

    >>> db = SequenceDB.from_lists([["a", "b", "c"], ["a", "c"], ["b", "c"]])
    >>> mine(db, min_support=2).names
    ['b > c']

    Single items and any gap between items:

    >>> ps = mine(db, min_support=2, min_length=1, max_length=2, max_gap=None)
    >>> ps.names
    ['a', 'b', 'c', 'a > c', 'b > c']
    >>> ps.support_counts[:, 0].tolist()
    [2, 2, 3, 2, 2]
    >>> mine(db, min_support=1, max_length=2, max_gap=None).names
    ['a > b', 'a > c', 'b > c']
    """
    where = "mine"
    _check_db(db, where)
    if db.n_tokens == 0:
        raise ParameterError("The sequence database has no tokens; nothing to mine. "
                             "Check the encoding step (were all events dropped?).")
    min_length = check_int(min_length, "min_length", where, minimum=1)
    max_length = check_int(max_length, "max_length", where, minimum=min_length, allow_none=True)
    max_gap, max_window = _check_constraints(max_gap, max_window, where, min_length)
    max_patterns = check_int(max_patterns, "max_patterns", where, minimum=1)
    for name, val in (("skip_pauses", skip_pauses), ("start_with_action", start_with_action),
                      ("end_with_action", end_with_action), ("closed", closed),
                      ("maximal", maximal), ("instance_counts", instance_counts)):
        if not isinstance(val, (bool, np.bool_)):
            raise ParameterError(f"The '{name}' parameter of mine must be True or False. "
                                 f"Got {val!r} instead.")
    if support_unit not in ("learner", "sequence"):
        raise ParameterError(f"The 'support_unit' parameter of {where} must be 'learner' or "
                             f"'sequence'. Got {support_unit!r} instead.")
    names, sizes, seq_groups, gidx = _group_slots(db)
    G = len(names)
    units = learner_units(db.learners, seq_groups, G) if support_unit == "learner" else None
    # Searched on sequence counts with the learner threshold: a pattern in T learners is
    # in at least T sequences, and so are its prefixes, so pruning stays exact; the
    # learner count itself is checked on the reported patterns below.
    thr = _thresholds(min_support, sizes if units is None else units[2], where,
                      "sequences" if units is None else "learners")

    # level 1 by a presence count: which symbols are frequent in some group
    sym_support = _symbol_support(db, gidx, G)
    frequent_sym = np.any(sym_support >= thr[None, :], axis=1)
    alphabet = np.flatnonzero(frequent_sym)
    is_pause_local = db.is_pause[alphabet]
    level1 = np.arange(len(alphabet))
    if start_with_action:
        level1 = level1[~is_pause_local]
    if first_items is not None:
        level1 = level1[np.isin(alphabet[level1], _first_item_ids(first_items, db))]
    mode, engine_cons = _engine(max_gap, max_window, skip_pauses)

    def allowed_fn(levels, k):
        lev = levels[k]
        n_sym = len(alphabet)
        if k == 1:
            return np.ones((len(lev["sym"]), n_sym), dtype=bool)
        table = levels[k]["child_in"]          # level k-1 ids x sym -> level k id
        q = lev["suffix"]
        allowed = np.ones((len(q), n_sym), dtype=bool)
        has = q >= 0
        allowed[has] = table[q[has]] >= 0
        if max_gap is None:  # without a gap limit p[:-1] + s is a sub-pattern too
            allowed &= table[lev["parent"]] >= 0
        return allowed

    def keep_fn(k, counts, flat):
        return np.any(counts >= thr[None, :], axis=1)

    def target_fn(k, lev):
        ok = np.full(len(lev["sym"]), k >= min_length, dtype=bool)
        if end_with_action:
            ok &= ~is_pause_local[lev["sym"]]
        return ok

    levels, triples, stats = search(
        db, alphabet=alphabet, gidx=gidx, G=G, mode=mode, level1=level1,
        allowed_fn=allowed_fn, keep_fn=keep_fn, target_fn=target_fn,
        max_length=max_length, max_patterns=max_patterns,
        cons=engine_cons,
        with_counts=bool(instance_counts) or units is not None)

    # reported candidates in search order: length, then last item, item before it, ...
    pats, support, nodes = [], [], []
    offsets = node_offsets(levels)
    for k in range(1, len(levels)):
        lev = levels[k]
        tgt = np.flatnonzero(lev["target"])   # in search order (see module docstring)
        nodes.append(tgt + offsets[k])
        rows = alphabet[lev["pats"][tgt]]
        pats.extend(tuple(r) for r in rows.tolist())
        support.append(lev["support"][tgt])
    support = np.concatenate(support) if support else np.zeros((0, G), dtype=np.int64)
    nodes = np.concatenate(nodes) if nodes else np.zeros(0, dtype=np.int64)
    all_counts = None
    if units is not None:
        all_counts = assemble_counts(triples, offsets, nodes)
        by_learner = learner_support(all_counts, units, G)
        frequent = np.any(by_learner >= thr[None, :], axis=1)
        pats = [p for p, f in zip(pats, frequent.tolist()) if f]
        support, nodes = support[frequent], nodes[frequent]
        all_counts = all_counts[:, np.flatnonzero(frequent)]
    keep = np.ones(len(pats), dtype=bool)
    if closed or maximal:
        not_closed, not_maximal = _superpattern_flags(pats, support, len(db.vocab))
        if closed:
            keep &= ~not_closed
        if maximal:
            keep &= ~not_maximal
    idx = np.flatnonzero(keep)
    if all_counts is None:
        counts = assemble_counts(triples, offsets, nodes[idx])
    elif instance_counts:
        counts = sp.csr_matrix(all_counts[:, idx])
    else:  # asked for no matrix: the same empty matrix as the search without counts
        counts = sp.csr_matrix((db.n_sequences, len(idx)), dtype=all_counts.dtype)
    constraints = dict(
        min_support=min_support, min_length=min_length, max_length=max_length,
        max_gap=max_gap, max_window=max_window, skip_pauses=bool(skip_pauses),
        start_with_action=bool(start_with_action), end_with_action=bool(end_with_action),
        closed=bool(closed), maximal=bool(maximal), max_patterns=max_patterns,
        instance_counts=bool(instance_counts), support_unit=support_unit,
        order="length, then last item, item before it, ... (vocabulary ids)")
    return PatternSet(
        patterns=[pats[i] for i in idx], vocab=list(db.vocab), is_pause=db.is_pause.copy(),
        group_names=names, group_sizes=sizes, support_counts=support[idx],
        counts=counts, seq_groups=seq_groups, constraints=constraints, search_stats=stats)


def match(db, patterns, *, max_gap=_DEFAULTS["max_gap"], max_window=_DEFAULTS["max_window"],
          skip_pauses=_DEFAULTS["skip_pauses"]):
    """Find given patterns in a database with the miner's exact semantics.

    Parameters
    ----------
    db : SequenceDB
    patterns : PatternSet or list
        Patterns as tuples of token ids of ``db.vocab``, as readable names
        (``"a > b"``) or as lists of token names. A PatternSet's own vocabulary is
        translated to ``db.vocab`` by name.
    max_gap, max_window, skip_pauses
        As in :func:`mine`.

    Returns
    -------
    PatternSet
        The patterns in the given order with per-group support and instance counts.

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "a", "b"], ["b", "a"]])
    >>> ps = match(db, ["a > b", "b > a"])
    >>> ps.counts.toarray().tolist()
    [[2, 1], [0, 1]]
    """
    where = "match"
    _check_db(db, where)
    max_gap, max_window = _check_constraints(max_gap, max_window, where, 1)
    if not isinstance(skip_pauses, (bool, np.bool_)):
        raise ParameterError(f"The 'skip_pauses' parameter of match must be True or False. "
                             f"Got {skip_pauses!r} instead.")
    pats = _normalize_patterns(patterns, db)
    names, sizes, seq_groups, gidx = _group_slots(db, allow_empty=True)
    G = len(names)
    constraints = dict(max_gap=max_gap, max_window=max_window, skip_pauses=bool(skip_pauses))
    if not pats:
        return PatternSet(patterns=[], vocab=list(db.vocab), is_pause=db.is_pause.copy(),
                          group_names=names, group_sizes=sizes,
                          support_counts=np.zeros((0, G), dtype=np.int64),
                          counts=sp.csr_matrix((db.n_sequences, 0), dtype=np.int64),
                          seq_groups=seq_groups, constraints=constraints)
    alphabet = np.unique(np.concatenate([np.asarray(p, dtype=np.int64) for p in pats]))
    lut = np.full(len(db.vocab), -1, dtype=np.int64)
    lut[alphabet] = np.arange(len(alphabet))
    local = [tuple(lut[list(p)].tolist()) for p in pats]
    trie = build_trie(local, len(alphabet))
    mode, engine_cons = _engine(max_gap, max_window, skip_pauses)

    def allowed_fn(levels, k):
        return trie[k + 1]["child_in"] >= 0 if k + 1 < len(trie) else \
            np.zeros((len(levels[k]["sym"]), len(alphabet)), dtype=bool)

    def keep_fn(k, counts, flat):
        return np.ones(len(flat), dtype=bool)

    def target_fn(k, lev):
        return trie[k]["is_pattern"]

    levels, triples, stats = search(
        db, alphabet=alphabet, gidx=gidx, G=G, mode=mode, level1=trie[1]["sym"],
        allowed_fn=allowed_fn, keep_fn=keep_fn, target_fn=target_fn,
        max_length=len(trie) - 1, max_patterns=None, cons=engine_cons)
    offsets = node_offsets(levels)
    support = np.concatenate([levels[k]["support"] for k in range(1, len(levels))])
    # (a pattern's global node: offsets[length] + its number within the level)
    nodes = np.array([offsets[len(p)] + trie[len(p)]["index"][p] for p in local], dtype=np.int64)
    counts = assemble_counts(triples, offsets, nodes)
    return PatternSet(
        patterns=[tuple(int(t) for t in p) for p in pats], vocab=list(db.vocab),
        is_pause=db.is_pause.copy(), group_names=names, group_sizes=sizes,
        support_counts=support[nodes], counts=counts, seq_groups=seq_groups,
        constraints=constraints, search_stats=stats)


def pattern_table(ps):
    """Table of a PatternSet for people: support per group and mean instance counts.

    Columns: ``pattern``, ``length``, ``support_<group>`` (share of the group's
    sequences), ``count_<group>`` (number of sequences), ``instances_<group>``
    (mean instance count per sequence of the group).

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "a", "b"], ["b", "a"]])
    >>> pattern_table(match(db, ["a > b"]))[["pattern", "support_all", "instances_all"]]
      pattern  support_all  instances_all
    0   a > b          0.5            1.0
    """
    frame = ps.to_frame()
    counts = ps.counts.tocsc()
    for g, name in enumerate(ps.group_names):
        rows = np.flatnonzero(ps.seq_groups == g)
        total = np.asarray(counts[rows].sum(axis=0)).ravel() if len(rows) else \
            np.zeros(ps.n_patterns)
        frame[f"instances_{name}"] = total / max(len(rows), 1)
    return frame


def save_patternset(ps, folder, *, table_name="patterns.csv"):
    """Write a PatternSet to ``folder``: the table, ``counts.npz`` and ``patternset.json``.

    The JSON file holds the patterns, vocabulary, groups, supports and constraints;
    ``counts.npz`` the sparse instance-count matrix (scipy format, plain arrays only). The
    CSV table (:func:`pattern_table`) is for people and is not read back.

    Returns
    -------
    pathlib.Path
        The folder.

    Examples
    --------
    >>> import tempfile
    >>> db = SequenceDB.from_lists([["a", "b"], ["b", "a", "b"]])
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     folder = save_patternset(mine(db, min_support=2, min_length=1), tmp)
    ...     sorted(p.name for p in folder.iterdir())
    ...     load_patternset(folder).names
    ['counts.npz', 'patterns.csv', 'patternset.json']
    ['a', 'b', 'a > b']
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    write_csv(pattern_table(ps), folder / table_name)
    with open_new(folder / "counts.npz", "wb") as fh:
        sp.save_npz(fh, sp.csr_matrix(ps.counts, dtype=np.int64), compressed=True)
    meta = {
        "format": _PS_FORMAT, "version": _PS_VERSION,
        "patterns": [list(p) for p in ps.patterns],
        "names": ps.names,
        "vocab": list(ps.vocab),
        "is_pause": [bool(x) for x in ps.is_pause],
        "group_names": list(ps.group_names),
        "group_sizes": [int(x) for x in ps.group_sizes],
        "support_counts": ps.support_counts.tolist(),
        "seq_groups": [int(x) for x in ps.seq_groups],
        "constraints": {k: json_default(v) if isinstance(v, np.generic) else v
                        for k, v in ps.constraints.items()},
    }
    with open_new(folder / "patternset.json") as fh:
        fh.write(json.dumps(meta, indent=1, sort_keys=True, ensure_ascii=False))
    return folder


def load_patternset(folder):
    """Read a PatternSet written by :func:`save_patternset` (folder or its CSV path).

    Parameters
    ----------
    folder : str or pathlib.Path
        The folder, or the path of the pattern table inside it.

    Returns
    -------
    PatternSet
    """
    folder = Path(folder)
    if folder.suffix.lower() == ".csv":
        folder = folder.parent
    meta_path, npz_path = folder / "patternset.json", folder / "counts.npz"
    if not meta_path.is_file() or not npz_path.is_file():
        raise DataFileError(f"{folder}: not a pattern set folder (needs patternset.json and "
                            f"counts.npz); create one with 'seqmine mine'.")
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{meta_path}: unreadable JSON ({exc}); re-run 'seqmine mine'.") \
            from None
    if meta.get("format") != _PS_FORMAT or meta.get("version") != _PS_VERSION:
        raise DataFileError(f"{meta_path}: unsupported pattern set version "
                            f"{meta.get('version')!r} (this seqmine reads {_PS_VERSION}); "
                            f"re-run 'seqmine mine'.")
    counts = sp.load_npz(npz_path).tocsr()
    n_groups = len(meta["group_names"])
    return PatternSet(
        patterns=[tuple(p) for p in meta["patterns"]], vocab=meta["vocab"],
        is_pause=np.array(meta["is_pause"], dtype=bool), group_names=meta["group_names"],
        group_sizes=np.array(meta["group_sizes"], dtype=np.int64),
        support_counts=np.array(meta["support_counts"], dtype=np.int64).reshape(-1, n_groups),
        counts=counts, seq_groups=np.array(meta["seq_groups"], dtype=np.int64),
        constraints=meta.get("constraints", {}))


# ====================================================================== helpers
def _check_db(db, where):
    if not isinstance(db, SequenceDB):
        raise ParameterError(f"{where} needs a SequenceDB; got {type(db).__name__}. "
                             f"Encode events first (seqmine.Encoder or 'seqmine encode').")
    if db.n_sequences == 0:
        raise ParameterError(f"The sequence database given to {where} is empty (0 sequences); "
                             f"check the input file and the encoding step.")


def _check_constraints(max_gap, max_window, where, min_length):
    max_gap = check_int(max_gap, "max_gap", where, minimum=0, allow_none=True)
    max_window = check_int(max_window, "max_window", where, minimum=1, allow_none=True)
    if max_window is not None and max_window < min_length:
        raise ParameterError(
            f"The 'max_window' parameter of {where} ({max_window}) is shorter than "
            f"'min_length' ({min_length}); no pattern could fit. Raise max_window or "
            f"lower min_length.")
    return max_gap, max_window


def _engine(max_gap, max_window, skip_pauses):
    """Projection mode and the constraints it runs with.

    A short window alone runs in the gap mode with the gap the window implies (two
    consecutive items inside a window of ``w`` tokens have at most ``w - 2`` tokens
    between them, or ``w`` non-pause tokens when pauses are skipped), which prunes
    the same occurrences as the window and is faster than tracking minimal windows.
    """
    cons = dict(max_gap=max_gap, max_window=max_window, skip_pauses=bool(skip_pauses))
    if max_gap is not None:
        return "gap", cons
    if max_window is None:
        return "first", cons
    if max_window <= _IMPLIED_GAP_WINDOW:
        cons["max_gap"] = max_window if skip_pauses else max(max_window - 2, 0)
        return "gap", cons
    return "frontier", cons


def _group_slots(db, allow_empty=False):
    """(group names, sizes, per-sequence group index, slot per sequence)."""
    n = db.n_sequences
    if db.n_groups == 0:
        return ["all"], np.array([n], dtype=np.int64), np.zeros(n, dtype=np.int64), \
            np.zeros(n, dtype=np.int64)
    sizes = db.group_sizes().astype(np.int64)
    if sizes.sum() == 0 and not allow_empty:
        raise ParameterError(
            "No sequence belongs to any group (all group labels are missing); assign "
            "outcome groups or build the database without group names.")
    G = db.n_groups
    gidx = np.where(db.groups >= 0, db.groups, G).astype(np.int64)
    return list(db.group_names), sizes, db.groups.astype(np.int64), gidx


#: Mean sequences per learner from which a sequence-counted minimum support is flagged.
SESSIONS_PER_LEARNER_NOTE = 2.0


def note_sequence_support(db, min_support, support_unit):
    """Warn (``support_counts_sequences``) when ``min_support`` counts sequences while
    learners have several each: a behaviour shown in one session per learner can stay
    below it and is then never tested. Returns the mean sequences per learner."""
    n_learners = len(np.unique(db.learners)) if db.n_sequences else 0
    ratio = db.n_sequences / n_learners if n_learners else 0.0
    if support_unit == "sequence" and ratio >= SESSIONS_PER_LEARNER_NOTE:
        warnings.warn(SeqmineWarning(
            f"Minimum support ({min_support}) counts sequences, and learners have "
            f"{ratio:.1f} sequences each on average: a behaviour that learners show in one "
            f"session of several can stay below it and is then never tested. "
            f"--support-unit learner counts learners instead (more patterns, more tests).",
            code="support_counts_sequences"), stacklevel=2)
    return ratio


def learner_units(learners, seq_groups, n_groups):
    """Learner-in-group units of the sequences, or None when each has its own learner.

    Returns ``(unit_of_sequence, unit_group, units_per_group)``: a unit is a learner
    within one group (a learner whose sequences are in two groups counts in each);
    sequences without a group belong to no unit (-1).

    Examples
    --------
    >>> u, g, n = learner_units(np.array(["a", "a", "b"]), np.array([0, 0, 1]), 2)
    >>> u.tolist(), g.tolist(), n.tolist()
    ([0, 0, 1], [0, 1], [1, 1])
    """
    learners = np.asarray(learners)
    seq_groups = np.asarray(seq_groups, dtype=np.int64)
    if len(np.unique(learners)) == len(learners):
        return None
    _, lid = np.unique(learners, return_inverse=True)
    lid = lid.ravel().astype(np.int64)
    has = seq_groups >= 0
    key = lid * (n_groups + 1) + np.where(has, seq_groups, n_groups)
    keys, unit = np.unique(key, return_inverse=True)
    unit = unit.ravel().astype(np.int64)
    unit_group = (keys % (n_groups + 1)).astype(np.int64)
    unit_group[unit_group == n_groups] = -1
    unit[~has] = -1
    return unit, unit_group, np.bincount(unit_group[unit_group >= 0],
                                         minlength=n_groups).astype(np.int64)


def learner_support(counts, units, n_groups):
    """Per-group learner support ``(n_patterns, n_groups)`` of a sequences x patterns
    count matrix, with the units of :func:`learner_units`."""
    unit, unit_group, _ = units
    counts = sp.csr_matrix(counts)
    ok = unit >= 0
    n_units = len(unit_group)
    agg = sp.csr_matrix((np.ones(int(ok.sum())), (unit[ok], np.flatnonzero(ok))),
                        shape=(n_units, counts.shape[0]))
    present = counts.copy()
    present.data = (present.data > 0).astype(np.float64)
    in_unit = (agg @ present).tocsr()
    in_unit.data = (in_unit.data > 0).astype(np.float64)
    grouped = np.flatnonzero(unit_group >= 0)
    member = sp.csr_matrix((np.ones(len(grouped)), (unit_group[grouped], grouped)),
                           shape=(n_groups, n_units))
    return np.rint((member @ in_unit).toarray().T).astype(np.int64)


def _thresholds(min_support, sizes, where, unit="sequences"):
    """Smallest support count meeting ``min_support`` in each group (huge if none);
    ``sizes`` and the count are of ``unit`` (learners or sequences)."""
    huge = np.iinfo(np.int64).max
    if isinstance(min_support, (bool, np.bool_)) or not isinstance(min_support, numbers.Real):
        raise ParameterError(f"The 'min_support' parameter of {where} must be a float in "
                             f"(0, 1] or an int >= 1. Got {min_support!r} instead.")
    if isinstance(min_support, numbers.Integral):
        m = int(min_support)
        if m < 1 or m > sizes.max():
            raise ParameterError(
                f"The 'min_support' parameter of {where} is a count of {m} {unit}, but the "
                f"largest group has {int(sizes.max())}; use a count between 1 and "
                f"{int(sizes.max())} or a fraction in (0, 1].")
        return np.where(sizes > 0, m, huge).astype(np.int64)
    f = float(min_support)
    if not (0 < f <= 1):
        raise ParameterError(f"The 'min_support' parameter of {where} must be a float in "
                             f"(0, 1] or an int >= 1. Got {min_support!r} instead.")
    thr = np.full(len(sizes), huge, dtype=np.int64)
    for g, n in enumerate(sizes.tolist()):
        if n == 0:
            continue
        c = max(int(np.ceil(f * n)) - 1, 0)
        while c / n < f:  # same comparison as support_count / size >= min_support
            c += 1
        thr[g] = c
    return thr


def _symbol_support(db, gidx, G):
    """Distinct sequences per (vocabulary id, group), shape (n_vocab, G)."""
    V = len(db.vocab)
    out = np.zeros((V, G + 1), dtype=np.int64)
    lengths = db.lengths
    per = max(1, (1 << 24) // max(V, 1))
    tok = db.tokens.astype(np.int64)
    for s0 in range(0, db.n_sequences, per):
        s1 = min(s0 + per, db.n_sequences)
        t0, t1 = db.offsets[s0], db.offsets[s1]
        seq = np.repeat(np.arange(s1 - s0, dtype=np.int64), lengths[s0:s1])
        pres = np.bincount(seq * V + tok[t0:t1], minlength=(s1 - s0) * V).reshape(s1 - s0, V)
        r, c = np.nonzero(pres)
        out += np.bincount(c * (G + 1) + gidx[s0:s1][r], minlength=V * (G + 1)).reshape(V, G + 1)
    return out[:, :G]


def _normalize_patterns(patterns, db):
    """List of tuples of vocabulary ids of ``db``."""
    if isinstance(patterns, PatternSet):
        if list(patterns.vocab) == list(db.vocab):
            patterns = patterns.patterns
        else:
            patterns = [[patterns.vocab[t] for t in p] for p in patterns.patterns]
    out = []
    V = len(db.vocab)
    index = None
    for p in patterns:
        if isinstance(p, str):
            t = parse_pattern(p, db.vocab)
        else:
            items = list(p)
            if items and all(isinstance(x, str) for x in items):
                if index is None:
                    index = {v: i for i, v in enumerate(db.vocab)}
                missing = [x for x in items if x not in index]
                if missing:
                    raise ParameterError(
                        f"Pattern {items!r}: token {missing[0]!r} is not in the vocabulary; "
                        f"check the spelling or re-encode with the same mapping.")
                t = tuple(index[x] for x in items)
            else:
                if not all(isinstance(x, (numbers.Integral, np.integer))
                           and not isinstance(x, bool) and 0 <= x < V for x in items):
                    raise ParameterError(
                        f"Pattern {items!r}: items must be token names or ids in [0, {V}).")
                t = tuple(int(x) for x in items)
        if len(t) == 0:
            raise ParameterError("An empty pattern was given to match; every pattern needs at "
                                 "least one token.")
        out.append(t)
    return out


def _superpattern_flags(pats, support, n_vocab):
    """(not_closed, not_maximal) flags: a reported super-pattern exists (with equal support)."""
    n = len(pats)
    not_closed = np.zeros(n, dtype=bool)
    not_maximal = np.zeros(n, dtype=bool)
    if n == 0:
        return not_closed, not_maximal
    lengths = np.array([len(p) for p in pats])
    by_len = {m: np.flatnonzero(lengths == m) for m in np.unique(lengths).tolist()}
    base = n_vocab + 1
    max_len = int(lengths.max())
    bulk = base ** max_len < 2 ** 62 and max_len <= _MAX_BULK_SUBSET_LENGTH
    if not bulk:
        return _superpattern_flags_slow(pats, support)
    rows = {m: np.array([pats[i] for i in idx], dtype=np.int64).reshape(len(idx), m)
            for m, idx in by_len.items()}
    powers = base ** np.arange(max_len, dtype=np.int64)

    def encode(a):
        return (a + 1) @ powers[: a.shape[1]]

    keys = {}
    for m, r in rows.items():
        kk = encode(r)
        order = np.argsort(kk)
        keys[m] = (kk[order], by_len[m][order])
    for k, rk in rows.items():
        q_idx = by_len[k]
        for m in by_len:
            if m >= k:
                continue
            sk, sidx = keys[m]
            for combo in itertools.combinations(range(k), m):
                sub = encode(rk[:, list(combo)])
                pos = np.minimum(np.searchsorted(sk, sub), len(sk) - 1)
                found = sk[pos] == sub
                p_idx = sidx[pos[found]]
                not_maximal[p_idx] = True
                same = np.all(support[p_idx] == support[q_idx[found]], axis=1)
                not_closed[p_idx[same]] = True
    return not_closed, not_maximal


def _superpattern_flags_slow(pats, support):
    n = len(pats)
    not_closed = np.zeros(n, dtype=bool)
    not_maximal = np.zeros(n, dtype=bool)
    for i, p in enumerate(pats):
        for j, q in enumerate(pats):
            if len(q) > len(p) and is_subsequence(p, q):
                not_maximal[i] = True
                if np.array_equal(support[i], support[j]):
                    not_closed[i] = True
                    break
    return not_closed, not_maximal


def _first_item_ids(first_items, db):
    """Vocabulary ids of ``first_items`` (ids or token names)."""
    ids = []
    for item in first_items:
        if isinstance(item, str):
            if item not in db.vocab:
                raise ParameterError(f"The 'first_items' parameter of mine names {item!r}, "
                                     f"which is not in the vocabulary.")
            ids.append(db.vocab.index(item))
        else:
            ids.append(check_int(item, "first_items", "mine", minimum=0))
    return np.asarray(ids, dtype=np.int64)
