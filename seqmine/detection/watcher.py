"""Live watcher: run detectors on a stream of events, one event at a time.

The watcher tokenises each learner's events exactly as the offline encoder does
(mapping, symbol template, repeat collapsing, pause tokens binned with the stored
edges, session splitting) and advances every detector with a small automaton that
honours the gap and window limits. A detector *fires* when one of its occurrences
ends, following the earliest-end greedy rule of :mod:`seqmine.mining.patterns`: the firing
count per learner equals the offline instance count (summed over the learner's
sequences) exactly.

Hint delivery is kept apart from counting: every firing is reported, and those that
should not reach the learner now (cool-down, outranked by another firing of the same
event, or an encourage pattern that was just shown) carry ``suppressed=True`` and a
reason. Encourage detectors can also fire on *absence*: the pattern has not been shown
after a number of events or seconds of a sequence.

Default delivery policy
-----------------------
Both directions reach learners, each at the moment it can help:

* a **discourage** detector hints when its pattern occurs;
* an **encourage** detector hints when its pattern has *not* occurred by its absence
  point (``absence`` in the detectors file; ``seqmine detectors`` and ``analyze`` set
  it per detector from the data, see :func:`seqmine.detection.detectors.absence_thresholds`).
  Completing an encourage pattern is counted but not hinted (``reason="no_hint"``),
  unless ``hint_on_encourage=True`` (e.g. to acknowledge it);
* at most one hint per event (the smallest ``priority``, then the largest effect, then
  the one hinted least recently), and none within ``cooldown_seconds`` of the last;
* an absence hint held back by the cool-down or outranked is tried again at the
  learner's next event after the cool-down, as long as the pattern has still not
  occurred (it is a standing suggestion, not a reaction to one event);
* at most ``max_absence_hints`` absence hints (default 2) per sequence, so a learner
  is not handed every productive ordering at once; further absence firings are
  reported with ``reason="limit"``.

Exactness
---------
Per-learner occurrence counts equal the offline instance counts when (1) each
learner's events arrive in time order (ties in file order), (2) no learner's state
expires inside a sequence (``idle_timeout=None`` or longer than any gap inside a
sequence), and (3) pauses are not binned per learner (``learner_quantile`` needs the
whole sequence; the watcher then uses the global edges and says so in ``notes``).
The watcher rejects the rows the loader rejects (empty or non-text fields, control
characters, over-long actions, bad or out-of-range times, a time form other than the
stream's, exact duplicates), so the same events reach both.

How it works
------------
All detectors share one prefix tree (trie) over their tokens; tokens index the trie
nodes they can advance (token -> nodes), so the work per event is proportional to
the nodes that token touches, not to the number of detectors. For each learner and
trie node the watcher keeps ONE partial match: the one ending at the node's latest
matching position with the latest possible start. That one is enough: the latest
start is best for the window limit and for the non-overlap rule, the latest end is
best for the gap limit, and the best start can only grow as the end moves right
(by induction over the prefix length: the best predecessor of a later position is
the parent's latest entry, whose start is at least as late). A partial match is
dropped as soon as the gap or window limit can no longer be met. Per-learner memory
is therefore at most one small tuple per trie node, whatever the constraints.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

from .._util.checks import check_int, check_number
from .._util.isotime import parse_iso_datetime
from .._util.text import has_control_characters
from ..encoding.sequences import PAUSE_PREFIX
from ..errors import SeqmineInputError
from ..inputs.clock import TIME_UNITS, resolve_timezone
from .detectors import load_detectors, validate_detectors

__all__ = ["Watcher", "Firing", "EventError", "parse_event_time"]

_T_MAX = 4102444800.0  # 2100-01-01T00:00:00Z in Unix seconds (the loader's upper bound)
_MAX_ACTION_LENGTH = 200  # the loader's default limit
_NEG_INF = float("-inf")


class EventError(SeqmineInputError):
    """A live event that cannot be used (the message says why, in one line)."""


@dataclass(slots=True)
class Firing:
    """One detector firing for one learner.

    Attributes
    ----------
    learner : str
    detector : str
        Detector id.
    kind : {"occurrence", "absence"}
        ``occurrence``: the pattern was just completed (these are the counts that
        equal offline instance counts); ``absence``: an encourage pattern has not been
        shown after the configured number of events or seconds.
    time : float
        Time (seconds) of the event that completed the match or triggered the absence.
    event_times : tuple of float
        Time of each matched token (a pause token carries the time of the event it
        follows); empty for absence firings.
    sequence : str
        Session of the firing (``""`` when sequences are whole learners).
    occurrence : int
        Running number of this detector's occurrences for this learner (0 for absence).
    direction : str
    priority : int
    hint : str
    suppressed : bool
        True when the hint should not be shown now.
    reason : str or None
        Why it is suppressed: ``"cooldown"``, ``"outranked"``, ``"no_hint"`` (a
        completed encourage pattern) or ``"limit"`` (``max_absence_hints`` reached).
    """

    learner: str
    detector: str
    kind: str
    time: float
    event_times: tuple = ()
    sequence: str = ""
    occurrence: int = 0
    direction: str = ""
    priority: int = 1
    hint: str = ""
    suppressed: bool = False
    reason: str = None
    #: position of the detector in the file (set by the watcher; not a parameter)
    _index: int = field(default=-1, init=False, repr=False, compare=False)

    def to_dict(self, iso_times=False, per_second=1):
        """Plain JSON record (``type`` = ``"firing"``); times as ISO 8601 if asked, else
        as numbers in the stream's unit (``per_second`` = 1000 for milliseconds).

        Examples
        --------
        >>> f = Firing("a", "d", "occurrence", 1700000000.25, event_times=(1700000000.25,))
        >>> f.to_dict(per_second=1000)["time"], f.to_dict()["time"]
        (1700000000250, 1700000000.25)
        """
        fmt = _iso if iso_times else (lambda x: _in_unit(x, per_second))
        return {
            "type": "firing", "learner": self.learner, "detector": self.detector,
            "kind": self.kind, "direction": self.direction, "time": fmt(self.time),
            "event_times": [fmt(x) for x in self.event_times], "sequence": self.sequence,
            "occurrence": self.occurrence, "priority": self.priority,
            "suppressed": self.suppressed, "reason": self.reason, "hint": self.hint,
        }


def parse_event_time(value, per_second=1, zone=None):
    """Parse one event time to ``(seconds, kind)`` like the offline loader.

    Numbers and numeric strings count ``1 / per_second`` seconds (kind ``"numeric"``;
    ``per_second`` is 1000 for milliseconds); other strings are ISO 8601 (kind
    ``"iso"``; no zone means UTC, or local time of ``zone``, a
    :class:`zoneinfo.ZoneInfo`, read with ``fold=0`` at a daylight-saving change as
    the loader does). Raises :class:`EventError`.

    Examples
    --------
    >>> parse_event_time("2026-01-01T00:00:10Z")
    (1767225610.0, 'iso')
    >>> parse_event_time(12)
    (12.0, 'numeric')
    >>> parse_event_time(1767225610123, per_second=1000)
    (1767225610.123, 'numeric')
    """
    tv = type(value)
    if tv is float or tv is int:
        try:
            f = float(value)
        except OverflowError:  # an integer beyond the float range
            raise EventError("time is not a finite number of seconds before 2100") from None
        kind = "numeric"
    elif tv is str:
        s = value.strip()
        if not s:
            raise EventError("the time is empty")
        try:
            f = float(s)
            kind = "numeric"
        except ValueError:
            try:
                dt = parse_iso_datetime(s)
            except ValueError:
                raise EventError(f"time {value!r} is neither ISO 8601 nor numeric seconds") from None
            if dt.tzinfo is None:
                dt = dt.replace(tzinfo=zone or timezone.utc)
            f = dt.timestamp()
            kind = "iso"
            if f < 0 or f > _T_MAX:
                raise EventError(f"time {value!r} lies before 1970 or after 2100")
            return f, kind
    else:
        raise EventError(f"time {value!r} is neither ISO 8601 nor numeric seconds")
    if per_second != 1:
        f = f / per_second
    if not (-_T_MAX <= f <= _T_MAX):  # also catches NaN and infinities
        raise EventError(f"time {value!r} is not a finite number of seconds before 2100")
    return f, kind


class Watcher:
    """Run detectors on live events and report firings.

    Parameters
    ----------
    detectors : dict or str or Path
        A detectors document (see :mod:`seqmine.detection.detectors`) or the path of a file.
    cooldown_seconds : float >= 0
        After a hint is delivered to a learner, further hints to that learner within
        this many seconds (event time) are suppressed (``reason="cooldown"``).
    idle_timeout : float > 0 or None
        A learner's state is dropped when the stream time has moved this many seconds
        past their last event; if they come back they start afresh. Choose it at least
        as long as the encoding's ``session_gap`` (for ``unit="learner"``, longer than
        any pause you want counted) so expiry never cuts a sequence the offline
        analysis keeps whole. ``None`` keeps every learner.
    out_of_order_tolerance : float >= 0
        An event more than this many seconds older than the learner's latest event is
        rejected with an :class:`EventError` (not reordered). Smaller steps back are
        processed in arrival order.
    hint_on_encourage : bool
        Whether a completed encourage pattern is delivered as a hint (e.g. praise);
        by default it is counted but suppressed with ``reason="no_hint"``.
    max_absence_hints : int >= 0 or None, default 2
        Most absence hints delivered per sequence (``None``: no limit).
    reject_duplicates : bool
        Reject an event equal to an earlier one of the same learner at the same time
        (learner, time, action, session, target, channel), like the loader's default.

    Attributes
    ----------
    stats : dict
        Counters: events, dropped (by the mapping), collapsed, rejected,
        out_of_order, duplicates, firings, hints, expired_learners.
    notes : list of str
        Non-fatal notices (e.g. the first event with an action symbol not seen
        offline); the caller may drain it.

    Examples
    --------
    >>> doc = {"format": "seqmine-detectors", "version": 1,
    ...        "encoding": {"template": "{action}"},
    ...        "matching": {"max_gap": 0, "max_window": None, "skip_pauses": False},
    ...        "detectors": [{"id": "D1", "tokens": ["set", "run"],
    ...                       "direction": "discourage"}]}
    >>> w = Watcher(doc)
    >>> w.process({"learner": "a", "time": 0, "action": "set"})
    []
    >>> [f.detector for f in w.process({"learner": "a", "time": 5, "action": "run"})]
    ['D1']
    """

    def __init__(self, detectors, *, cooldown_seconds=60.0, idle_timeout=86400.0,
                 out_of_order_tolerance=1.0,
                 hint_on_encourage=False, reject_duplicates=True, max_absence_hints=2):
        where = "Watcher"
        if isinstance(detectors, (str, Path)):
            doc = load_detectors(detectors)
        else:
            doc = validate_detectors(detectors, source="detectors")
        self.detectors = doc
        self.cooldown_seconds = check_number(cooldown_seconds, "cooldown_seconds", where, minimum=0)
        self.idle_timeout = check_number(idle_timeout, "idle_timeout", where, minimum=0,
                                         strict=True, allow_none=True)
        self.out_of_order_tolerance = check_number(out_of_order_tolerance,
                                                   "out_of_order_tolerance", where, minimum=0)
        self.hint_on_encourage = bool(hint_on_encourage)
        self.max_absence_hints = check_int(max_absence_hints, "max_absence_hints", where,
                                           minimum=0, allow_none=True)
        self.reject_duplicates = bool(reject_duplicates)
        self.notes = []
        self._compile(doc)
        self._learners = {}
        self._stream_time = _NEG_INF
        self._time_kind = None
        self._noted = set()
        self.stats = {k: 0 for k in ("events", "dropped", "collapsed", "rejected", "out_of_order",
                                     "duplicates", "firings", "hints", "expired_learners")}

    # ------------------------------------------------------------------ public
    @property
    def n_learners(self):
        """Number of learners whose state is currently held."""
        return len(self._learners)

    @property
    def per_second(self):
        """Units of a numeric stream time per second (1000 for milliseconds), from the
        detectors file's clock; numeric times in firings are written in that unit."""
        return self._per_second

    @property
    def time_kind(self):
        """``"iso"`` or ``"numeric"``: the time form of the stream (None before any event)."""
        return self._time_kind

    def process(self, event):
        """Consume one event; return the firings it causes (possibly empty).

        Parameters
        ----------
        event : dict
            ``learner``, ``time`` (ISO 8601 or seconds) and ``action``; optional
            ``session``, ``target``, ``channel``.

        Returns
        -------
        list of Firing

        Raises
        ------
        EventError
            When the event is unusable (not an object, a missing or empty field, a bad
            time, out of order beyond the tolerance, a duplicate). The watcher's state
            is unchanged and the stream can continue.
        """
        self.stats["events"] += 1
        try:
            learner = event["learner"]
            action = event["action"]
            traw = event["time"]
        except KeyError:
            self.stats["rejected"] += 1
            missing = ", ".join(repr(k) for k in ("learner", "time", "action") if k not in event)
            raise EventError(f"missing field {missing}; every event needs learner, "
                             f"time and action") from None
        except (TypeError, IndexError):
            self.stats["rejected"] += 1
            raise EventError("the event is not a JSON object with learner, time and "
                             "action") from None
        try:
            # fast path for ordinary strings; _text gives the precise messages
            if type(learner) is str and type(action) is str:
                learner = learner.strip()
                action = action.strip()
                if not (learner and action and len(action) <= _MAX_ACTION_LENGTH
                        and learner.isprintable() and action.isprintable()):
                    learner = _text(learner, "learner")
                    action = _text(action, "action")
            else:
                learner = _text(learner, "learner")
                action = _text(action, "action")
            t, kind = parse_event_time(traw, self._per_second, self._zone)
            if kind != self._time_kind:
                if self._time_kind is None:
                    self._time_kind = kind
                else:
                    raise EventError(f"time {traw!r} is {kind} but the stream's times are "
                                     f"{self._time_kind}; use one time format")
        except EventError:
            self.stats["rejected"] += 1
            raise
        st = self._learners.get(learner)
        if st is None:
            st = self._learners[learner] = _Learner()
        elif t < st.raw_time:
            if t < st.raw_time - self.out_of_order_tolerance:
                self.stats["rejected"] += 1
                self.stats["out_of_order"] += 1
                raise EventError(
                    f"learner {learner!r}: time {traw!r} is {st.raw_time - t:g} s before the "
                    f"learner's latest event (tolerance {self.out_of_order_tolerance:g} s); "
                    f"events are not reordered")
        g = event.get
        if self.reject_duplicates:
            raw = (action, g("session"), g("target"), g("channel"))
            if t == st.dup_time:
                key = _event_key(raw)
                if st.dup_keys is None:
                    st.dup_keys = {_event_key(st.dup_first)}
                if key in st.dup_keys:
                    self.stats["rejected"] += 1
                    self.stats["duplicates"] += 1
                    raise EventError(f"learner {learner!r}: duplicate of an earlier event "
                                     f"at time {traw!r}")
                st.dup_keys.add(key)
            elif t > st.dup_time:
                st.dup_time = t
                st.dup_first = raw
                st.dup_keys = None
        unit_session = self._unit_session
        if unit_session or not self._simple_template:
            target = _opt_text(g("target"))
            channel = _opt_text(g("channel"))
            session = _opt_text(g("session"))
        if t > st.raw_time:
            st.raw_time = t
        if t > self._stream_time:
            self._stream_time = t
            if self.idle_timeout is not None and t - self._last_sweep > self._sweep_every:
                self._expire(t, keep=learner)
        # ---- encoder: mapping, symbol, sequence boundary, collapse, pause
        if self._mapping:
            action = self._mapping.get(action, action)
            if action == "":
                self.stats["dropped"] += 1
                return []
        if self._simple_template:
            sym = action
        else:
            sym = self._template.format_map({"action": action, "target": target,
                                             "channel": channel, "session": session})
        fired = []
        us = round(t * 1e6)  # gaps in whole microseconds, as offline
        if st.n_events == 0 or (unit_session and (
                session != st.session
                or (self._session_gap_us is not None and us - st.last_us > self._session_gap_us))):
            self._new_sequence(st, t, session if unit_session else "")
        elif self._collapse and sym == st.prev_sym:
            st.last_time = t
            st.last_us = us
            st.n_events += 1
            self.stats["collapsed"] += 1
            if self._has_absence:
                self._check_absence(st, t, fired, learner)
            return self._deliver(st, learner, t, fired) if fired else fired
        else:
            if self._pauses:
                ptok = self._pause_tok[bisect_right(self._edges_us, us - st.last_us)]
                if ptok is not None:
                    self._advance(st, ptok, self._pause_counted, st.prev_tok_time, fired)
        tok = self._sym_id.get(sym, -1)
        if tok < 0 and self._vocabulary is not None and sym not in self._vocabulary \
                and sym not in self._noted and len(self._noted) < 1000:
            self._noted.add(sym)
            self.notes.append(f"learner {learner!r}: action symbol {sym!r} was not seen in the "
                              f"analysed data; it is counted as a token that matches no detector")
        self._advance(st, tok, True, t, fired)
        st.prev_sym = sym
        st.last_time = t
        st.last_us = us
        st.prev_tok_time = t
        st.n_events += 1
        if self._has_absence:
            self._check_absence(st, t, fired, learner)
        if fired:
            return self._deliver(st, learner, t, fired)
        return fired

    def tick(self, now):
        """Fire time-based absence rules due by ``now`` (seconds) for every learner.

        Without calls to ``tick``, time-based absence rules are only checked when a
        learner's own events arrive.
        """
        now = check_number(now, "now", "Watcher.tick")
        out = []
        for learner, st in list(self._learners.items()):
            if st.n_events:
                fired = []
                self._check_absence(st, now, fired, learner)
                if fired:
                    out.extend(self._deliver(st, learner, now, fired))
        return out

    def flush(self):
        """End of stream: drop every learner's state and return their occurrence counts.

        No absence firings are produced here (a learner who has left needs no hint);
        call :meth:`tick` first if time-based absence rules should be checked.

        Returns
        -------
        dict
            learner -> {detector id: number of occurrence firings}, for the learners
            whose state was held (expired learners are not included).
        """
        ids = self._det_ids
        out = {learner: {ids[d]: n for d, n in sorted(st.counts.items())}
               for learner, st in self._learners.items()}
        self._learners.clear()
        return out

    # -------------------------------------------------------------- compiling
    def _compile(self, doc):
        enc = doc["encoding"]
        self._template = enc.get("template", "{action}")
        self._simple_template = self._template == "{action}"
        self._mapping = dict(enc.get("mapping") or {})
        self._collapse = bool(enc.get("collapse_repeats", False))
        self._unit_session = enc.get("unit", "learner") == "session"
        gap = enc.get("session_gap")
        self._session_gap = None if gap is None else float(gap)
        self._session_gap_us = None if gap is None else round(float(gap) * 1e6)
        clock = enc.get("time") or {}
        self._per_second = TIME_UNITS.get(clock.get("unit") or "s") or 1
        self._zone = resolve_timezone(clock.get("timezone"), "encoding.time.timezone")
        pause = enc.get("pause") or {}
        labels = list(pause.get("labels", []))
        implicit = set(pause.get("implicit", []))
        self._edges = [float(e) for e in pause.get("edges", [])]
        self._edges_us = [round(e * 1e6) for e in self._edges]
        self._pauses = pause.get("strategy", "none") != "none" and bool(labels)
        if pause.get("strategy") == "learner_quantile":
            self.notes.append("the encoding bins pauses by each learner's own quantiles, which "
                              "need the whole sequence; live pauses use the global edges, so "
                              "counts can differ from the offline analysis")
        vocab = doc.get("vocabulary")
        self._vocabulary = set(vocab) if vocab else None
        m = doc["matching"]
        self._max_gap = m.get("max_gap")
        self._max_window = m.get("max_window")
        self._pause_counted = not m.get("skip_pauses", False)
        dets = [d for d in doc["detectors"] if d.get("enabled", True)]
        sel = doc.get("selection") or {}
        eff_name = sel.get("effect", "cohens_h")
        self._det_ids = [d["id"] for d in dets]
        self._det_dir = [d["direction"] for d in dets]
        self._det_priority = [int(d.get("priority", 1)) for d in dets]
        self._det_hint = [d.get("hint", "") for d in dets]
        self._det_hintable = [d["direction"] == "discourage" or self.hint_on_encourage
                              for d in dets]
        self._det_effect = []
        for d in dets:
            v = ((d.get("evidence") or {}).get("effects") or {}).get(eff_name)
            self._det_effect.append(abs(v) if isinstance(v, (int, float)) and math.isfinite(v) else 0.0)
        # token ids
        self._sym_id = {}
        for d in dets:
            for tkn in d["tokens"]:
                self._sym_id.setdefault(tkn, len(self._sym_id))
        self._pause_tok = [None if lab in implicit else self._sym_id.get(PAUSE_PREFIX + lab, -1)
                           for lab in labels]
        # prefix tree over the detectors' tokens
        parent, depth, dets_at, has_child = [], [], [], []
        node_of = {}
        by_token = {}
        for k, d in enumerate(dets):
            prefix = ()
            par = -1
            for tkn in d["tokens"]:
                prefix = prefix + (tkn,)
                n = node_of.get(prefix)
                if n is None:
                    n = node_of[prefix] = len(parent)
                    parent.append(par)
                    depth.append(len(prefix))
                    dets_at.append([])
                    has_child.append(False)
                    by_token.setdefault(self._sym_id[tkn], []).append(n)
                    if par >= 0:
                        has_child[par] = True
                par = n
            dets_at[par].append(k)
        self._steps = [tuple((n, parent[n], tuple(dets_at[n]), has_child[n])
                             for n in sorted(by_token.get(i, ()), key=lambda n: -depth[n]))
                       for i in range(len(self._sym_id))]
        self.n_nodes_ = len(parent)
        # absence rules sorted by threshold
        ev_rules, sec_rules = [], []
        for k, d in enumerate(dets):
            ab = d.get("absence") or {}
            if d["direction"] == "encourage":
                if ab.get("after_events") is not None:
                    ev_rules.append((int(ab["after_events"]), k))
                if ab.get("after_seconds") is not None:
                    sec_rules.append((float(ab["after_seconds"]), k))
        self._abs_events = sorted(ev_rules)
        self._abs_seconds = sorted(sec_rules)
        self._has_absence = bool(ev_rules or sec_rules)
        self._sweep_every = max((self.idle_timeout or 0.0) / 8.0, 1.0)
        self._last_sweep = _NEG_INF

    # ---------------------------------------------------------------- engine
    def _new_sequence(self, st, t, session):
        st.seq += 1
        st.session = session
        st.label = (session or f"s{st.seq}") if self._unit_session else ""
        st.pos = 0
        st.c = 0
        st.nodes = {}
        st.last_end = {}
        st.prev_sym = None
        st.n_events = 0
        st.start_time = t
        st.abs_e = 0
        st.abs_s = 0
        st.abs_done = set()
        st.abs_retry = []
        st.abs_hints = 0

    def _advance(self, st, tok, counted, time, fired):
        """Feed one token at the next position of the learner's current sequence."""
        i = st.pos
        st.pos = i + 1
        cb = st.c
        c = cb + 1 if counted else cb
        st.c = c
        if tok < 0:
            return
        nodes = st.nodes
        max_gap = self._max_gap
        max_win = self._max_window
        # (node, parent, detectors ending here, has children), deepest first
        for n, par, dets, has_child in self._steps[tok]:
            if par < 0:
                s = i
                cbs = cb
                times = (time,)
            else:
                e = nodes.get(par)
                if e is None:
                    continue
                if max_gap is not None and cb - e[2] > max_gap:
                    del nodes[par]
                    continue
                cbs = e[1]
                if max_win is not None and c - cbs > max_win:
                    del nodes[par]
                    continue
                s = e[0]
                times = e[3] + (time,)
            if dets:
                last_end = st.last_end
                for d in dets:
                    if s > last_end.get(d, -1):
                        last_end[d] = i
                        fired.append((d, times))
            if has_child:
                nodes[n] = (s, cbs, c, times)

    def _check_absence(self, st, t, fired, learner):
        if st.abs_retry and not (st.last_hint is not None
                                 and t - st.last_hint < self.cooldown_seconds):
            retry, st.abs_retry = st.abs_retry, []
            for k in retry:
                if k not in st.last_end:
                    fired.append((k, None))
        rules = self._abs_events
        while st.abs_e < len(rules) and rules[st.abs_e][0] <= st.n_events:
            k = rules[st.abs_e][1]
            st.abs_e += 1
            if k not in st.last_end and k not in st.abs_done:
                st.abs_done.add(k)
                fired.append((k, None))
        rules = self._abs_seconds
        while st.abs_s < len(rules) and rules[st.abs_s][0] <= t - st.start_time:
            k = rules[st.abs_s][1]
            st.abs_s += 1
            if k not in st.last_end and k not in st.abs_done:
                st.abs_done.add(k)
                fired.append((k, None))

    def _deliver(self, st, learner, t, fired):
        """Build Firing objects; rank the hint candidates and apply the cool-down.

        Only the best-ranked candidate of an event can be delivered (unless the
        cool-down is 0, when all are); while the learner is cooling down all
        candidates are suppressed, so ranking is only needed outside the cool-down.
        """
        out = []
        cands = []
        counts = st.counts
        label = st.label
        ids, dirs, prios, hints = self._det_ids, self._det_dir, self._det_priority, self._det_hint
        hintable = self._det_hintable
        cooldown = self.cooldown_seconds
        cooling = st.last_hint is not None and t - st.last_hint < cooldown
        held = (True, "cooldown") if cooling else (False, None)
        limit = self.max_absence_hints
        for d, times in fired:
            if times is None:
                if limit is not None and st.abs_hints >= limit:
                    f = Firing(learner, ids[d], "absence", t, (), label, 0, dirs[d], prios[d],
                               hints[d], True, "limit")
                else:
                    f = Firing(learner, ids[d], "absence", t, (), label, 0, dirs[d], prios[d],
                               hints[d], held[0], held[1])
                    cands.append(f)
            else:
                occ = counts.get(d, 0) + 1
                counts[d] = occ
                if hintable[d]:
                    f = Firing(learner, ids[d], "occurrence", t, times, label, occ, dirs[d],
                               prios[d], hints[d], held[0], held[1])
                    cands.append(f)
                else:
                    f = Firing(learner, ids[d], "occurrence", t, times, label, occ, dirs[d],
                               prios[d], hints[d], True, "no_hint")
            f._index = d
            out.append(f)
        self.stats["firings"] += len(out)
        if cooling or not cands:
            self._retry_absence(st, out)
            return out
        if cooldown > 0 and len(cands) > 1:
            effect = self._det_effect
            hint_times = st.hint_times
            best = min(cands, key=lambda f: (f.priority, -effect[f._index],
                                             hint_times.get(f._index, _NEG_INF), f._index))
            for f in cands:
                if f is not best:
                    f.suppressed = True
                    f.reason = "outranked"
            cands = (best,)
        for f in cands:
            st.last_hint = t
            st.hint_times[f._index] = t
            if f.kind == "absence":
                st.abs_hints += 1
        self.stats["hints"] += len(cands)
        self._retry_absence(st, out)
        return out

    @staticmethod
    def _retry_absence(st, firings):
        """Absence hints held back now are tried again after the cool-down."""
        for f in firings:
            if (f.kind == "absence" and f.suppressed and f.reason != "limit"
                    and f._index not in st.abs_retry):
                st.abs_retry.append(f._index)

    def _expire(self, now, keep):
        self._last_sweep = now
        cutoff = now - self.idle_timeout
        stale = [k for k, st in self._learners.items() if st.raw_time < cutoff and k != keep]
        for k in stale:
            del self._learners[k]
        self.stats["expired_learners"] += len(stale)


class _Learner:
    """Per-learner state: encoder position, partial matches, hint bookkeeping."""

    __slots__ = ("raw_time", "last_time", "last_us", "prev_tok_time", "prev_sym", "dup_time",
                 "dup_first", "dup_keys",
                 "seq", "session", "label", "pos", "c", "nodes", "last_end", "n_events",
                 "start_time", "abs_e", "abs_s", "abs_done", "abs_retry", "abs_hints", "counts",
                 "last_hint", "hint_times")

    def __init__(self):
        self.raw_time = _NEG_INF
        self.last_time = _NEG_INF
        self.last_us = 0
        self.prev_tok_time = _NEG_INF
        self.prev_sym = None
        self.dup_time = _NEG_INF
        self.dup_first = None
        self.dup_keys = None
        self.seq = 0
        self.session = ""
        self.label = ""
        self.pos = 0
        self.c = 0
        self.nodes = {}
        self.last_end = {}
        self.n_events = 0
        self.start_time = 0.0
        self.abs_e = 0
        self.abs_s = 0
        self.abs_done = set()
        self.abs_retry = []
        self.abs_hints = 0
        self.counts = {}
        self.last_hint = None
        self.hint_times = {}


def _text(value, name):
    if type(value) is str:
        s = value.strip()
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        s = str(value)
    else:
        raise EventError(f"field {name!r} must be a string, got {type(value).__name__}")
    if not s:
        raise EventError(f"field {name!r} is empty")
    if not s.isprintable() and has_control_characters(s):  # isprintable: a quick pre-test
        raise EventError(f"field {name!r} contains control characters")
    if name == "action" and len(s) > _MAX_ACTION_LENGTH:
        raise EventError(f"the action is {len(s)} characters long (limit {_MAX_ACTION_LENGTH})")
    return s


def _event_key(raw):
    return (raw[0],) + tuple(_opt_text(v) for v in raw[1:])


def _opt_text(value):
    if value is None:
        return ""
    if type(value) is str:
        return value.strip()
    return str(value).strip()


def _in_unit(seconds, per_second):
    """Seconds as a number of the stream's units (a whole number when it is one)."""
    if per_second == 1:
        return seconds
    value = seconds * per_second
    whole = round(value)
    return int(whole) if abs(value - whole) < 1e-3 else value


def _iso(seconds):
    return datetime.fromtimestamp(seconds, tz=timezone.utc).isoformat().replace("+00:00", "Z")
