"""Encode event tables as symbol sequences with pause-length tokens.

Token-stream rule (the live watcher follows it exactly)
-------------------------------------------------------
1. Events of one learner are taken in time order (stable on ties).
2. The action mapping renames, merges or drops actions; dropped events vanish
   entirely (they do not split pauses).
3. The symbol of an event is the template filled from its columns
   (``{action}``, ``{target}``, ``{channel}``, ``{session}``).
4. With ``unit="session"`` (the default) a new sequence starts when the session column
   changes or the gap to the previous event exceeds ``session_gap`` seconds (30
   minutes by default, a common inactivity timeout in web analytics; ``None`` turns
   the rule off); no pause token is emitted across that boundary.
5. With ``collapse_repeats`` an event whose symbol equals the previous kept event's
   symbol in the same sequence is merged into it: no token; the run's end time
   becomes the merged event's time.
6. After each kept event except the last of its sequence, the gap from the end of
   its run to the next kept event is binned with
   ``np.searchsorted(edges, gap, side="right")`` (bins are ``[edge_k, edge_k+1)``)
   and, unless the bin's label is implicit, the token ``pause:<label>`` follows the
   event. Pause tokens carry the time and source row of the event they follow.

Gaps (for pauses and for the session rule) are whole microseconds, differences of
:func:`seqmine.inputs.clock.to_microseconds` of the event times, and edges are compared
in microseconds too: a gap exactly on an edge always lands in the upper bin. How
``quantile`` edges are chosen (each learner weighs the same, on the gap values the
clock can express, fewer bins when it cannot support them) is in
:mod:`seqmine.encoding.pauses`.
"""

from __future__ import annotations

import string
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from .._util.checks import check_choice, check_int, check_number
from ..config import DEFAULT_CONFIG
from ..errors import DataFileError, NotFittedError, ParameterError, SeqmineWarning
from ..inputs.clock import to_microseconds
from .pauses import learner_weighted_edges, pause_labels, pause_ranges
from .sequences import PAUSE_PREFIX, SequenceDB, smallest_int_dtype

__all__ = ["Encoder", "encode", "encoder_from_settings", "load_mapping", "pause_labels",
           "TEMPLATE_FIELDS", "DEFAULT_SESSION_GAP"]

#: Event columns a symbol template may use.
TEMPLATE_FIELDS = ("action", "target", "channel", "session")

#: Inactivity (seconds) after which a new sequence starts by default: 30 minutes, a
#: common practice for sessions in web analytics (from the configuration defaults).
DEFAULT_SESSION_GAP = DEFAULT_CONFIG["encode"]["session_gap"]


def load_mapping(path):
    """Read an action mapping file: CSV with columns ``action,symbol``.

    An empty ``symbol`` drops the action; several actions with one symbol merge.

    Returns
    -------
    dict action -> symbol ("" = drop)
    """
    path = Path(path)
    if not path.is_file():
        raise DataFileError(f"{path}: mapping file not found; check the path.")
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise DataFileError(f"{path}: not valid UTF-8 text; re-save the mapping as UTF-8.") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise DataFileError(f"{path}: malformed mapping CSV ({' '.join(str(exc).split())}).") from None
    df.columns = [c.strip() for c in df.columns]
    for col in ("action", "symbol"):
        if col not in df.columns:
            raise DataFileError(
                f"{path}: the mapping needs columns 'action' and 'symbol' (found: "
                f"{', '.join(df.columns)}).")
    actions = df["action"].str.strip()
    dup = actions.duplicated(keep=False)
    if dup.any():
        raise DataFileError(
            f"{path}: action {actions[dup].iloc[0]!r} is mapped more than once; keep one row.")
    symbols = df["symbol"].str.strip()
    bad = symbols.str.startswith(PAUSE_PREFIX)
    if bad.any():
        raise DataFileError(
            f"{path}: symbol {symbols[bad].iloc[0]!r} starts with the reserved prefix "
            f"'{PAUSE_PREFIX}'; rename it.")
    return dict(zip(actions, symbols))


#: Defaults of the encoding options (the ``[encode]`` section of the configuration).
_DEFAULTS = DEFAULT_CONFIG["encode"]


class Encoder(BaseEstimator):
    """Turn an event table into a :class:`SequenceDB` with pause tokens.

    Parameters
    ----------
    template : str
        Symbol template, e.g. ``"{action}"`` or ``"{action}:{target}"``.
    mapping : dict, optional
        action -> symbol; ``""`` drops the action.
    collapse_repeats : bool
        Merge immediate repeats of a symbol.
    pause_strategy : {"quantile", "fixed", "learner_quantile", "none"}
        ``quantile``: edges split the gaps of the fitted events into bins of equal
        weight, each learner weighing the same, on the gap values the clock can express
        (see :mod:`seqmine.encoding.pauses`); ``fixed``: ``pause_thresholds`` seconds;
        ``learner_quantile``: each learner's own such edges (fast and slow learners
        become comparable; the global edges are still learned for live use); ``none``:
        no pause tokens.
    pause_bins : int
        Number of bins asked for by the quantile strategies. When the gaps take too
        few distinct values (a coarse clock), fewer bins are used, or none, and a
        ``pause_bins_reduced`` warning says so.
    pause_thresholds : sequence of float, optional
        Ascending positive edges in seconds for ``fixed`` (n edges -> n + 1 bins).
    implicit_pauses : sequence of str
        Bin labels that emit no token. ``"shortest"`` names the first bin whatever
        its label (the default), so the quickest gaps stay implicit for any bin count.
    unit : {"session", "learner"}
        What one sequence is: a session (the default; see ``session_gap``) or all of a
        learner's events.
    session_gap : float or None, default 1800
        With ``unit="session"``, a gap longer than this (seconds) starts a new sequence
        (30 minutes: a common practice for sessions in web analytics); ``None``: only
        a change of the session column does.

    Attributes
    ----------
    edges_ : ndarray
        Learned global pause bin edges (seconds).
    labels_ : list of str
    vocab_ : list of str
        Vocabulary learned by ``fit``; ``transform`` appends unseen symbols after it so
        token ids learned on training data stay valid on new data.
    encoding_ : dict
        Plain-data parameters (copied into ``SequenceDB.encoding``).

    Examples
    --------
    >>> ev = pd.DataFrame({"learner": ["a"] * 4, "time": [0.0, 1.0, 31.0, 32.0],
    ...                    "action": ["set", "run", "measure", "run"]})
    >>> db = Encoder(pause_strategy="fixed", pause_thresholds=[10]).fit_transform(ev)
    >>> db.decode(0)
    ['set', 'run', 'pause:long', 'measure', 'run']
    >>> ev.loc[2:, "time"] += 3600  # an hour away: a second session
    >>> Encoder(pause_strategy="fixed", pause_thresholds=[10]).fit_transform(ev).n_sequences
    2
    """

    def __init__(self, template=_DEFAULTS["template"], *, mapping=_DEFAULTS["mapping"],
                 collapse_repeats=_DEFAULTS["collapse_repeats"],
                 pause_strategy=_DEFAULTS["pause_strategy"], pause_bins=_DEFAULTS["pause_bins"],
                 pause_thresholds=_DEFAULTS["pause_thresholds"],
                 implicit_pauses=tuple(_DEFAULTS["implicit_pauses"]), unit=_DEFAULTS["unit"],
                 session_gap=_DEFAULTS["session_gap"]):
        self.template = template
        self.mapping = mapping
        self.collapse_repeats = collapse_repeats
        self.pause_strategy = pause_strategy
        self.pause_bins = pause_bins
        self.pause_thresholds = pause_thresholds
        self.implicit_pauses = implicit_pauses
        self.unit = unit
        self.session_gap = session_gap

    # ------------------------------------------------------------- checks
    def _check_params(self):
        check_choice(self.pause_strategy, "pause_strategy",
                     ("quantile", "fixed", "learner_quantile", "none"), "Encoder")
        check_choice(self.unit, "unit", ("learner", "session"), "Encoder")
        check_int(self.pause_bins, "pause_bins", "Encoder", minimum=1, maximum=20)
        if self.session_gap is not None:
            check_number(self.session_gap, "session_gap", "Encoder", minimum=0, strict=True)
        fields = _template_fields(self.template)
        if "action" not in fields:
            raise ParameterError(
                f"The symbol template {self.template!r} must use {{action}}, e.g. "
                f"'{{action}}' or '{{action}}:{{target}}'.")
        if self.pause_strategy == "fixed":
            th = self.pause_thresholds
            if not th:
                raise ParameterError(
                    "pause_strategy='fixed' needs pause_thresholds, e.g. --pause-thresholds 5,30.")
            th = [check_number(t, "pause_thresholds", "Encoder", minimum=0, strict=True)
                  for t in th]
            if any(b <= a for a, b in zip(th, th[1:])):
                raise ParameterError(
                    f"pause_thresholds must be strictly ascending seconds; got {list(th)}.")
        return fields

    # ------------------------------------------------------------ fitting
    def fit(self, events, y=None):
        """Learn pause bin edges and the vocabulary from ``events``."""
        fields = self._check_params()
        ev = _apply_mapping(_prepare(events, fields), self.mapping)
        sym, seq_id, keep_first, run_end = self._symbols_and_runs(ev, fields)
        gaps, has_next = _gaps(ev["time_us"].to_numpy(), seq_id, keep_first, run_end)
        gap_learners = ev["learner"].to_numpy(object)[np.flatnonzero(keep_first)][has_next]
        gaps = gaps[has_next]
        n_bins = self.pause_bins
        reduced = False
        if self.pause_strategy == "fixed":
            edges = np.asarray(self.pause_thresholds, dtype=float)
        elif self.pause_strategy == "none":
            edges = np.zeros(0)
        else:
            edges = learner_weighted_edges(gaps, gap_learners, n_bins) / 1e6
            reduced = len(edges) < n_bins - 1
        self.edges_ = np.asarray(edges, dtype=float)
        self.labels_ = pause_labels(len(self.edges_) + 1) if self.pause_strategy != "none" else []
        implicit = [self.labels_[0] if p == "shortest" and self.labels_ else p
                    for p in (self.implicit_pauses or ())]
        asked = pause_labels(len(self.edges_) + 1 if not reduced else n_bins)
        unknown = [p for p in self.implicit_pauses or () if p != "shortest" and p not in asked]
        if unknown and self.pause_strategy != "none":
            raise ParameterError(
                f"implicit_pauses {unknown} are not pause bin labels; the labels are "
                f"{asked}.")
        if reduced and len(self.edges_) == 0:
            implicit = list(self.labels_)  # one bin: a pause token would say nothing
        self.implicit_ = [p for p in self.labels_ if p in implicit]
        kept_syms = sorted(set(sym[keep_first].tolist()))
        pause_toks = [PAUSE_PREFIX + lab for lab in self.labels_ if lab not in self.implicit_]
        clash = [s for s in kept_syms if s.startswith(PAUSE_PREFIX)]
        if clash:
            raise ParameterError(
                f"Action symbol {clash[0]!r} starts with the reserved prefix '{PAUSE_PREFIX}'; "
                f"rename it with a mapping file.")
        self.vocab_ = kept_syms + pause_toks
        self.encoding_ = {
            "template": self.template,
            "mapping": dict(sorted((self.mapping or {}).items())),
            "collapse_repeats": bool(self.collapse_repeats),
            "unit": self.unit,
            "session_gap": None if self.session_gap is None else float(self.session_gap),
            "pause": {
                "strategy": self.pause_strategy,
                "edges": [float(e) for e in self.edges_],
                "labels": list(self.labels_),
                "implicit": list(self.implicit_),
                "bins": int(n_bins),
            },
        }
        if reduced:
            _warn_reduced(gaps, n_bins, self.encoding_)
        return self

    def transform(self, events, groups=None, group_names=None):
        """Encode ``events`` into a SequenceDB.

        Parameters
        ----------
        events : DataFrame
            Columns ``learner, time, action`` (+ optional ``session, target, channel,
            source_row``).
        groups : mapping or Series, optional
            learner -> group name; learners not in it get group ``-1``.
        group_names : list of str, optional
            Order of the groups (default: sorted names in ``groups``).

        Returns
        -------
        SequenceDB
        """
        if not hasattr(self, "encoding_"):
            raise NotFittedError("This Encoder is not fitted yet; call fit first.")
        fields = self._check_params()
        ev = _apply_mapping(_prepare(events, fields), self.mapping)
        times = ev["time"].to_numpy(float)
        sym, seq_id, keep_first, run_end = self._symbols_and_runs(ev, fields)
        gaps, has_next = _gaps(ev["time_us"].to_numpy(), seq_id, keep_first, run_end)
        kidx = np.flatnonzero(keep_first)
        ksym = sym[kidx]
        kseq = seq_id[kidx]
        # vocabulary: fitted vocabulary first, unseen symbols appended (sorted)
        vocab = list(self.vocab_)
        index = {t: i for i, t in enumerate(vocab)}
        unseen = sorted(set(ksym.tolist()) - set(index))
        clash = [s for s in unseen if s.startswith(PAUSE_PREFIX)]
        if clash:
            raise ParameterError(
                f"Action symbol {clash[0]!r} starts with the reserved prefix '{PAUSE_PREFIX}'; "
                f"rename it with a mapping file.")
        for s in unseen:
            index[s] = len(vocab)
            vocab.append(s)
        pause_names = {PAUSE_PREFIX + lab for lab in self.labels_ if lab not in self.implicit_}
        is_pause = np.array([v in pause_names for v in vocab], dtype=bool)
        sym_codes = pd.Series(ksym).map(index).to_numpy(dtype=np.int64)
        # pause bins for the gap after each kept event that has a successor
        pause_code = np.full(len(kidx), -1, dtype=np.int64)
        if self.pause_strategy != "none" and len(kidx):
            bins = self._bin(gaps, has_next, ev["learner"].to_numpy(object)[kidx])
            label_tok = np.array([index.get(PAUSE_PREFIX + lab, -1) if lab not in self.implicit_
                                  else -1 for lab in self.labels_], dtype=np.int64)
            pause_code[has_next] = label_tok[bins[has_next]]
        n_out = 1 + (pause_code >= 0)
        pos = np.zeros(len(kidx) + 1, dtype=np.int64)
        np.cumsum(n_out, out=pos[1:])
        n_tok = int(pos[-1])
        tokens = np.empty(n_tok, dtype=np.int64)
        tokens[pos[:-1]] = sym_codes
        has_p = pause_code >= 0
        tokens[pos[:-1][has_p] + 1] = pause_code[has_p]
        rep = n_out
        tok_times = np.repeat(times[kidx], rep)
        rows = np.repeat(ev["source_row"].to_numpy(np.int64)[kidx], rep)
        tok_seq = np.repeat(kseq, rep)
        n_seq = int(seq_id.max()) + 1 if len(seq_id) else 0
        # sequences whose events were all dropped by the mapping disappear
        present = np.unique(kseq)
        renum = np.full(max(n_seq, 1), -1, dtype=np.int64)
        renum[present] = np.arange(len(present))
        tok_seq = renum[tok_seq]
        lens = np.bincount(tok_seq, minlength=len(present)) if n_tok else np.zeros(len(present), np.int64)
        offsets = np.zeros(len(present) + 1, dtype=np.int64)
        np.cumsum(lens, out=offsets[1:])
        first_ev = np.searchsorted(seq_id, np.arange(n_seq), side="left")
        learners = ev["learner"].to_numpy(object)[first_ev[present]]
        if self.unit == "session":
            sess = ev["session"].to_numpy(object)[first_ev[present]]
            # readable session id: learner's own session name, or its ordinal
            ordinal = pd.Series(learners).groupby(learners).cumcount().to_numpy() + 1
            sessions = np.array([s if s else f"s{k}" for s, k in zip(sess, ordinal)], dtype=object)
        else:
            sessions = np.full(len(present), "", dtype=object)
        if groups is not None:
            gmap = dict(groups.items()) if hasattr(groups, "items") else dict(groups)
            if group_names is None:
                group_names = sorted({str(v) for v in gmap.values() if isinstance(v, str)})
            gidx = {g: i for i, g in enumerate(group_names)}
            seq_groups = np.array([gidx.get(gmap.get(lr), -1) if isinstance(gmap.get(lr), str)
                                   else -1 for lr in learners], dtype=np.int64)
        else:
            group_names = list(group_names or [])
            seq_groups = np.full(len(present), -1, dtype=np.int64)
        enc = dict(self.encoding_)
        return SequenceDB(
            tokens=tokens.astype(smallest_int_dtype(max(len(vocab), 1))),
            offsets=offsets, vocab=vocab, is_pause=is_pause, times=tok_times,
            source_rows=rows, learners=learners, sessions=sessions, groups=seq_groups,
            group_names=list(group_names), encoding=enc,
        )

    def fit_transform(self, events, groups=None, group_names=None):
        """``fit`` on ``events`` then ``transform`` them."""
        return self.fit(events).transform(events, groups=groups, group_names=group_names)

    @classmethod
    def from_encoding(cls, encoding, vocab=None):
        """A fitted Encoder rebuilt from a ``SequenceDB.encoding`` dict.

        Parameters
        ----------
        encoding : dict
            ``SequenceDB.encoding`` or the ``encoding`` block of a detectors file.
        vocab : list of str, optional
            The vocabulary to keep token ids compatible with (e.g. ``db.vocab``).
        """
        pause = encoding.get("pause", {}) or {}
        strategy = pause.get("strategy", "none")
        edges = [float(e) for e in pause.get("edges", [])]
        enc = cls(template=encoding.get("template", "{action}"),
                  mapping=encoding.get("mapping") or None,
                  collapse_repeats=bool(encoding.get("collapse_repeats", False)),
                  pause_strategy=strategy,
                  pause_bins=int(pause.get("bins", max(len(pause.get("labels", [])), 1))),
                  pause_thresholds=edges if strategy == "fixed" else None,
                  implicit_pauses=tuple(pause.get("implicit", ())),
                  unit=encoding.get("unit", "learner"), session_gap=encoding.get("session_gap"))
        enc._check_params()
        enc.edges_ = np.asarray(edges, dtype=float)
        enc.labels_ = list(pause.get("labels", []))
        enc.implicit_ = list(pause.get("implicit", []))
        pause_toks = [PAUSE_PREFIX + lab for lab in enc.labels_ if lab not in enc.implicit_]
        enc.vocab_ = list(vocab) if vocab is not None else pause_toks
        enc.encoding_ = dict(encoding)
        return enc

    # ------------------------------------------------------------ helpers
    def _symbols_and_runs(self, ev, fields):
        parts = list(string.Formatter().parse(self.template))
        sym = None
        for literal, field_name, _spec, _conv in parts:
            piece = pd.Series(literal, index=ev.index, dtype=object) if literal else None
            if piece is not None:
                sym = piece if sym is None else sym + piece
            if field_name:
                col = ev[field_name].astype(str)
                sym = col if sym is None else sym + col
        sym = sym.to_numpy(dtype=object) if sym is not None else np.full(len(ev), "", dtype=object)
        learner = ev["learner"].to_numpy(object)
        times = ev["time_us"].to_numpy()
        new_seq = np.ones(len(ev), dtype=bool)
        if len(ev) > 1:
            new_seq[1:] = learner[1:] != learner[:-1]
            if self.unit == "session":
                sess = ev["session"].to_numpy(object)
                new_seq[1:] |= sess[1:] != sess[:-1]
                if self.session_gap is not None:
                    limit = to_microseconds(float(self.session_gap))
                    new_seq[1:] |= (times[1:] - times[:-1]) > limit
        seq_id = np.cumsum(new_seq) - 1
        keep_first = np.ones(len(ev), dtype=bool)
        if self.collapse_repeats and len(ev) > 1:
            keep_first[1:] = new_seq[1:] | (sym[1:] != sym[:-1])
        starts = np.flatnonzero(keep_first)
        ends = np.append(starts[1:] - 1, len(ev) - 1) if len(ev) else starts
        run_end = times[ends]  # a run ends at its last (latest) event
        return sym, seq_id, keep_first, run_end

    def _bin(self, gaps, has_next, kept_learners):
        """Bin of each gap (whole microseconds) against edges in microseconds."""
        if self.pause_strategy != "learner_quantile":
            return np.searchsorted(to_microseconds(self.edges_), gaps, side="right")
        # each learner's own edges, chosen like the global ones; a learner whose gaps
        # support fewer bins leaves the upper ones empty
        n_edges = len(self.edges_)
        bins = np.zeros(len(gaps), dtype=np.int64)
        idx = np.flatnonzero(has_next)
        df = pd.DataFrame({"learner": kept_learners[idx], "gap": gaps[idx]})
        for _who, part in df.groupby("learner", sort=False):
            g = part["gap"].to_numpy()
            e = learner_weighted_edges(g, np.zeros(len(g)), n_edges + 1)
            e = np.concatenate([e, np.full(n_edges - len(e), np.iinfo(np.int64).max)])
            bins[idx[part.index.to_numpy()]] = np.searchsorted(e, g, side="right")
        return bins


def encoder_from_settings(settings):
    """An unfitted :class:`Encoder` from plain settings (the ``[encode]`` configuration
    section): ``mapping`` is a mapping-file path, ``implicit_pauses`` a list,
    ``session_gap`` may be ``"none"``."""
    params = dict(settings)
    if isinstance(params.get("session_gap"), str):
        if params["session_gap"].strip().lower() not in ("none", "off"):
            raise ParameterError(
                f"session_gap must be a number of seconds or 'none'; got "
                f"{params['session_gap']!r}.")
        params["session_gap"] = None
    mapping = params.pop("mapping", None)
    implicit = tuple(params.pop("implicit_pauses", None) or ())
    return Encoder(mapping=load_mapping(mapping) if mapping else None,
                   implicit_pauses=implicit, **params)


def encode(events, groups=None, group_names=None, **params):
    """Fit an :class:`Encoder` with ``params`` on ``events`` and encode them."""
    return Encoder(**params).fit_transform(events, groups=groups, group_names=group_names)


# ------------------------------------------------------------------ internals
def _template_fields(template):
    try:
        parts = list(string.Formatter().parse(template))
    except (ValueError, TypeError):
        raise ParameterError(
            f"The symbol template {template!r} is malformed; use fields like "
            f"'{{action}}:{{target}}'.") from None
    fields = [f for _l, f, _s, _c in parts if f is not None]
    for f in fields:
        if f not in TEMPLATE_FIELDS:
            raise ParameterError(
                f"The symbol template uses {{{f}}}; allowed fields are "
                f"{', '.join('{' + x + '}' for x in TEMPLATE_FIELDS)}.")
    return fields


def _prepare(events, fields):
    missing = [c for c in ("learner", "time", "action") if c not in events.columns]
    if missing:
        raise ParameterError(f"The events table lacks column(s) {missing}; load it with load_events.")
    n = len(events)
    ev = pd.DataFrame({
        "learner": events["learner"].astype(str).to_numpy(object),
        "time": events["time"].to_numpy(float),
        "action": events["action"].astype(str).to_numpy(object),
    })
    for c in ("session", "target", "channel"):
        ev[c] = (events[c].astype(str).to_numpy(object) if c in events.columns
                 else np.full(n, "", dtype=object))
    ev["source_row"] = (events["source_row"].to_numpy(np.int64) if "source_row" in events.columns
                        else np.arange(1, n + 1, dtype=np.int64))
    bad = ~np.isfinite(ev["time"].to_numpy(float))
    if bad.any():
        raise ParameterError(
            f"The events table has {int(bad.sum())} missing or infinite time(s) (first at source "
            f"row {int(ev['source_row'].to_numpy()[bad][0])}); load the log with load_events, "
            f"which rejects such rows.")
    ev["time_us"] = to_microseconds(ev["time"].to_numpy(float))
    return ev.sort_values(["learner", "time"], kind="mergesort").reset_index(drop=True)


def _apply_mapping(ev, mapping):
    if not mapping:
        return ev
    mapped = ev["action"].map(lambda a: mapping.get(a, a))
    ev = ev.assign(action=mapped)
    return ev[ev["action"] != ""].reset_index(drop=True)


def _gaps(times, seq_id, keep_first, run_end):
    """Gap (whole microseconds) after each kept event to the next kept event of the same
    sequence; ``times`` and ``run_end`` are whole microseconds."""
    kidx = np.flatnonzero(keep_first)
    kseq = seq_id[kidx]
    has_next = np.zeros(len(kidx), dtype=bool)
    if len(kidx) > 1:
        has_next[:-1] = kseq[1:] == kseq[:-1]
    gaps = np.zeros(len(kidx), dtype=np.int64)
    if len(kidx) > 1:
        nxt = times[kidx[1:]]
        gaps[:-1] = nxt - run_end[:-1]
    return np.where(has_next, gaps, 0), has_next


def _warn_reduced(gaps, n_bins, encoding):
    """``pause_bins_reduced``: fewer bins than asked because the gaps take few values."""
    values = np.unique(gaps)
    shown = ", ".join(f"{v / 1e6:g} s" for v in values[:4]) + (" ..." if len(values) > 4 else "")
    pause = encoding["pause"]
    if len(pause["edges"]) == 0:
        used = "no pause tokens are written"
    else:
        ranges = pause_ranges(encoding)
        used = (f"{len(pause['labels'])} bins are used: "
                + "; ".join(f"{tok} {text}" for tok, text in ranges.items()))
    warnings.warn(SeqmineWarning(
        f"The gaps within sequences take {len(values)} distinct value(s) ({shown or 'none'}), "
        f"too few for {n_bins} pause bins on this clock; {used}.",
        code="pause_bins_reduced", count=n_bins - len(pause["labels"])), stacklevel=3)
