"""Detectors: select validated patterns and write them as a versioned JSON file.

A detectors file holds everything the live watcher needs to turn raw events into
the same token stream the offline analysis used (the encoding parameters), the
matching constraints, and one entry per detector: its tokens, its direction
(``discourage``: more common among weak learners; ``encourage``: more common among
strong learners), the evidence behind it, and an editable hint text and priority.

Findings behind detectors are correlational. Hint texts written by
:func:`build_detectors` are neutral placeholders: educators must review and rewrite
them, and detectors should be piloted before they drive hints for real learners.

File layout (version 1)::

    {"format": "seqmine-detectors", "version": 1,
     "notice": "...",
     "encoding": {template, mapping, collapse_repeats, unit, session_gap,
                  pause: {strategy, edges, labels, implicit, ...},
                  time: {unit: "s"|"ms"|"us", timezone: IANA name|null}},
     "vocabulary": [action symbols seen offline],
     "matching": {"max_gap": int|null, "max_window": int|null, "skip_pauses": bool},
     "groups": {"names": [...], "strong": str, "weak": str, "sizes": {name: int}},
     "selection": {the filters used},
     "detectors": [{"id", "pattern_id", "tokens", "direction", "favours", "evidence", "hint",
                    "priority", "absence": {"after_events", "after_seconds"} | null,
                    "enabled", "notes", "example"}]}

Priority: a smaller number is delivered first (1 = most important).

Hints worth piloting
--------------------
* **Both directions.** :func:`select_detectors` shares the detector slots between the
  favoured groups (``group_shares``; :func:`export_detectors` takes the share of
  ``encourage`` detectors, ``encourage_share``, default one half); slots one
  direction cannot fill go to the other.
* **Ranking.** When the contrast table carries the activity-volume adjustment
  (``q_volume``), candidates are ranked by it first -- evidence that survives the
  adjustment for how much a learner does -- then by effect size; otherwise by effect
  size, then q value.
* **Contents.** Each detector's ``evidence`` holds the support (share of sequences)
  and rate (occurrences per 100 tokens) per group, the group sizes, p and q values
  (also the volume- and order-adjusted ones and the evidence class when present),
  effect sizes, stability and replication, and the range in seconds of every pause
  token of the pattern (``pause_ranges``); ``example`` is one short excerpt of a
  sequence from the favoured group (the learner id as stored in the sequences:
  pseudonymized when the run was given a key).
* **Delivery.** Discourage detectors hint when the pattern occurs. Encourage
  detectors hint when the pattern has *not* occurred by the point at which most
  learners of the favoured group who showed it had shown it (``absence``; by default
  the 75th percentile of the action events up to the end of its first occurrence;
  :func:`absence_thresholds`). See :class:`seqmine.detection.watcher.Watcher`.
"""

from __future__ import annotations

import copy
import difflib
import json
import math
import numbers
import re
import string
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from .._util.checks import check_int, check_number
from .._util.outdir import open_new
from .._util.text import TERMINAL_UNSAFE
from ..config import DEFAULT_CONFIG
from ..encoding.pauses import pause_ranges
from ..encoding.sequences import PAUSE_PREFIX
from ..errors import ColumnError, DataFileError, ParameterError, SeqmineWarning
from ..mining.excerpts import build_examples, find_occurrence
from ..mining.patterns import is_subsequence, pattern_id, pattern_tokens, split_readable

__all__ = [
    "DETECTORS_FORMAT",
    "DETECTORS_VERSION",
    "DETECTOR_NOTICE",
    "DEFAULT_EVIDENCE",
    "EVIDENCE_KINDS",
    "select_detectors",
    "build_detectors",
    "export_detectors",
    "save_detectors",
    "load_detectors",
    "validate_detectors",
    "default_hint",
    "absence_thresholds",
]

#: Value of the ``format`` field of every detectors file.
DETECTORS_FORMAT = "seqmine-detectors"
#: Newest detectors file version this seqmine reads and writes (version 2 added the
#: optional ``example`` of each detector; version 1 files are read as they are).
DETECTORS_VERSION = 2
#: Caution copied into every detectors file.
DETECTOR_NOTICE = (
    "Detectors come from correlational findings. Educators must review and rewrite "
    "every hint, and detectors should be piloted before they drive hints for real "
    "learners; follow local data-protection law and your institution's ethics review."
)

_EFFECT_COLUMNS = ("risk_difference", "odds_ratio", "cohens_h", "cliffs_delta")
#: Values of the contrast table's ``evidence`` column a detector may rest on.
EVIDENCE_KINDS = ("order", "presence", "volume")
#: Default: only findings that survive the volume adjustment become detectors.
DEFAULT_EVIDENCE = tuple(DEFAULT_CONFIG["detectors"]["evidence"])
_TEMPLATE_FIELDS = ("action", "target", "channel", "session")
_PAUSE_STRATEGIES = ("quantile", "fixed", "learner_quantile", "none")
_TOP_KEYS = {"format", "version", "notice", "encoding", "vocabulary", "matching", "groups",
             "selection", "detectors", "created_by"}
_DETECTOR_KEYS = {"id", "pattern_id", "tokens", "direction", "favours", "evidence", "hint",
                  "priority", "absence", "enabled", "notes", "example"}
#: Optional contrast-table columns copied into a detector's evidence when present.
_EVIDENCE_COLUMNS = ("p_value", "q_value", "p_volume", "q_volume", "p_order", "q_order",
                     "q_rate", "stability", "replication")
#: Default quantile of the absence rule of encourage detectors (see absence_thresholds).
ABSENCE_QUANTILE = DEFAULT_CONFIG["detectors"]["absence_quantile"]
_MATCHING_KEYS = {"max_gap", "max_window", "skip_pauses"}
#: Longest detector id accepted.
MAX_ID_LENGTH = 100
# nothing in an id may move a terminal's cursor or reorder text
_UNSAFE_ID = re.compile(TERMINAL_UNSAFE)


# ====================================================================== selection
_DEFAULTS = DEFAULT_CONFIG["detectors"]


def select_detectors(contrast_table, *, max_q=_DEFAULTS["max_q"],
                     min_effect=_DEFAULTS["min_effect"], effect=_DEFAULTS["effect"],
                     min_stability=_DEFAULTS["min_stability"], lengths=None, groups=None,
                     max_detectors=_DEFAULTS["max_detectors"], drop_redundant=True,
                     evidence=DEFAULT_EVIDENCE, group_shares=None):
    """Choose the contrast-table rows worth exporting as detectors.

    A row is kept when it favours a group, its ``evidence`` is one of ``evidence``
    (by default only findings that survive the volume adjustment), the q value of
    its evidence test is at most ``max_q``, the absolute
    value of its ``effect`` column is at least ``min_effect``, its ``stability`` is at
    least ``min_stability``, its length is allowed and its favoured group is in
    ``groups``. Kept rows are ranked by the evidence that survives the adjustment
    for activity volume, smallest q first: the q value of each row's own test
    (``q_order`` for order, ``q_volume`` for presence, ``q_value`` for volume); then
    by absolute effect (largest first), q value and pattern name. With
    ``evidence=None`` (tables without the evidence columns) rows are ranked by
    absolute effect, q value and pattern name. With ``drop_redundant`` a row is
    dropped when the contrast table marks it redundant (a non-empty
    ``redundant_of``), or when its pattern contains, or is contained in, an already
    kept pattern favouring the same group (as a subsequence), so one behaviour yields
    one detector.

    ``group_shares`` divides the ``max_detectors`` slots between the favoured groups
    (largest remainders, so the quotas add up); each group fills its quota with its
    best-ranked rows and slots a group cannot fill go to the best remaining rows of
    the others. Without it the best rows are taken whatever group they favour.

    Parameters
    ----------
    contrast_table : DataFrame
        Output of ``contrast()`` (or ``patterns.csv``): columns ``pattern``,
        ``q_value``, ``favours``, the ``effect`` column and, when ``min_stability > 0``,
        ``stability``.
    max_q : float in (0, 1]
    min_effect : float >= 0
        Threshold on ``|effect|``. The default 0.2 is Cohen's "small" effect for h
        (common practice, Cohen 1988).
    effect : str
        Effect-size column used for filtering and ranking.
    min_stability : float in [0, 1]
        ``0`` disables the check (and the need for a ``stability`` column).
    lengths : int, (min, max) tuple or list of int, optional
        Allowed pattern lengths.
    groups : str or list of str, optional
        Only patterns favouring these groups.
    max_detectors : int >= 1, optional
        At most this many rows (default 20); None = no limit.
    drop_redundant : bool
    evidence : sequence of {"order", "presence", "volume"}, or None
        Kinds of evidence a row may rest on (the ``evidence`` column of the contrast
        table); the q value compared with ``max_q`` is that of the named test
        (``q_order``, ``q_volume``, ``q_value`` for ``"volume"``). Default
        ``("order", "presence")``: differences that activity volume explains are not
        exported. ``None`` selects on ``q_value`` alone (tables without evidence).
    group_shares : dict, optional
        Favoured group -> share of the slots (non-negative numbers, scaled to add up
        to 1), e.g. ``{"strong": 0.5, "weak": 0.5}``; needs ``max_detectors``.

    Returns
    -------
    DataFrame
        The kept rows in rank order, with a fresh index.

    Examples
    --------
    >>> t = pd.DataFrame({"pattern": ["a > b", "a > b > c", "d"], "length": [2, 3, 1],
    ...                   "q_value": [0.01, 0.01, 0.2], "q_volume": [0.01, 0.01, 0.2],
    ...                   "q_order": [0.01, 0.2, None], "evidence": ["order", "presence", ""],
    ...                   "favours": ["weak", "weak", "strong"],
    ...                   "cohens_h": [0.5, 0.6, 0.9], "stability": [0.9, 0.8, 0.9]})
    >>> select_detectors(t)["pattern"].tolist()
    ['a > b > c']
    >>> select_detectors(t, evidence=["order"])["pattern"].tolist()
    ['a > b']
    >>> t = pd.DataFrame({"pattern": ["a", "b", "c", "d"], "q_value": 0.01,
    ...                   "favours": ["weak", "weak", "weak", "strong"], "cohens_h": 0.5})
    >>> select_detectors(t, min_stability=0, max_detectors=2, evidence=None,
    ...                  group_shares={"strong": 0.5, "weak": 0.5})["pattern"].tolist()
    ['a', 'd']
    """
    where = "select_detectors"
    if not isinstance(contrast_table, pd.DataFrame):
        raise ParameterError(f"{where} needs the contrast table as a pandas DataFrame; got "
                             f"{type(contrast_table).__name__}.")
    max_q = check_number(max_q, "max_q", where, minimum=0, strict=True)
    if max_q > 1:
        raise ParameterError(f"The 'max_q' parameter of {where} must be in (0, 1]. Got {max_q!r} instead.")
    min_effect = check_number(min_effect, "min_effect", where, minimum=0)
    min_stability = check_number(min_stability, "min_stability", where, minimum=0)
    if min_stability > 1:
        raise ParameterError(f"The 'min_stability' parameter of {where} must be in [0, 1]. "
                             f"Got {min_stability!r} instead.")
    max_detectors = check_int(max_detectors, "max_detectors", where, minimum=1, allow_none=True)
    evidence = _check_evidence(evidence, where)
    needed = ["pattern", "q_value", "favours", effect]
    if min_stability > 0:
        needed.append("stability")
    if evidence is not None:
        needed += [c for c in ("evidence", "q_volume", "q_order") if c not in needed]
    missing = [c for c in needed if c not in contrast_table.columns]
    if missing:
        fix = (" Pass min_stability=0 (--min-stability 0) to skip the stability check."
               if missing == ["stability"] else
               " The table predates the volume and order tests: score it again with "
               "'seqmine contrast', or pass evidence=None (--evidence any) to select on "
               "q_value alone." if evidence is not None and "evidence" in missing else
               f" Choose another effect column with effect=/--effect (one of "
               f"{', '.join(c for c in _EFFECT_COLUMNS if c in contrast_table.columns) or 'none present'})."
               if missing == [effect] else "")
        raise ColumnError(f"The contrast table lacks column(s) {', '.join(missing)}.{fix}")
    t = contrast_table.reset_index(drop=True)
    pats = [tuple(pattern_tokens(r)) for r in t.to_dict("records")]
    lens = np.array([len(p) for p in pats], dtype=np.int64)
    favours = t["favours"].astype(object).where(t["favours"].notna(), "").astype(str).str.strip()
    q = pd.to_numeric(t["q_value"], errors="coerce").to_numpy(float)
    q_all = q.copy()
    eff = np.abs(pd.to_numeric(t[effect], errors="coerce").to_numpy(float))
    keep = (favours != "").to_numpy() & (eff >= min_effect)
    if evidence is not None:
        # only findings of the allowed kinds, judged by the q value of their own test
        kind = t["evidence"].astype(object).where(t["evidence"].notna(), "").astype(str)
        keep &= kind.isin(evidence).to_numpy()
        for name, col in (("order", "q_order"), ("presence", "q_volume")):
            q = np.where(kind == name, pd.to_numeric(t[col], errors="coerce"), q)
    keep &= q <= max_q
    if min_stability > 0:
        stab = pd.to_numeric(t["stability"], errors="coerce").to_numpy(float)
        if len(stab) and np.isnan(stab).all():
            warnings.warn(SeqmineWarning(
                "The contrast table has no stability values (resampling was skipped), so no "
                "pattern passes min_stability; pass min_stability=0 (--min-stability 0) or "
                "compute stability.", code="no_stability"), stacklevel=2)
        keep &= stab >= min_stability
    if drop_redundant and "redundant_of" in t.columns:
        red = t["redundant_of"].astype(object).where(t["redundant_of"].notna(), "")
        keep &= (red.astype(str).str.strip() == "").to_numpy()
    if lengths is not None:
        keep &= _length_mask(lens, lengths)
    if groups is not None:
        allowed = [groups] if isinstance(groups, str) else [str(g) for g in groups]
        keep &= favours.isin(allowed).to_numpy()
    idx = np.flatnonzero(keep)
    names = t["pattern"].astype(str).to_numpy()
    # rank by the evidence that survives the volume adjustment: the q value of each
    # row's own test (q_order for order, q_volume for presence); without evidence
    # kinds (evidence=None) by effect size
    if evidence is not None:
        qs = np.where(np.isnan(q), np.inf, q)
        order = sorted(idx.tolist(), key=lambda i: (qs[i], -eff[i], q_all[i], names[i]))
    else:
        order = sorted(idx.tolist(), key=lambda i: (-eff[i], q[i], names[i]))
    fav = favours.to_numpy()
    # one behaviour, one detector: drop rows nested in a better one of the same group
    distinct = []
    for i in order:
        if drop_redundant and any(fav[j] == fav[i] and (is_subsequence(pats[j], pats[i])
                                                        or is_subsequence(pats[i], pats[j]))
                                  for j in distinct):
            continue
        distinct.append(i)
    if group_shares is None or max_detectors is None:
        chosen = distinct[:max_detectors] if max_detectors is not None else distinct
    else:
        chosen = _share_slots(distinct, fav, _check_shares(group_shares, where), max_detectors)
    rank = {i: r for r, i in enumerate(order)}
    chosen = sorted(chosen, key=rank.get)
    return t.iloc[chosen].reset_index(drop=True)


def _check_evidence(evidence, where):
    if evidence is None:
        return None
    chosen = [evidence] if isinstance(evidence, str) else list(evidence)
    bad = [e for e in chosen if e not in EVIDENCE_KINDS]
    if bad or not chosen:
        raise ParameterError(
            f"The 'evidence' parameter of {where} must list some of "
            f"{', '.join(EVIDENCE_KINDS)} (or be None for q_value alone). Got {evidence!r} "
            f"instead.")
    return chosen


def _check_shares(shares, where):
    if not isinstance(shares, dict) or not shares:
        raise ParameterError(f"The 'group_shares' parameter of {where} must be a dict of "
                             f"group -> share, e.g. {{'strong': 0.5, 'weak': 0.5}}. Got "
                             f"{shares!r} instead.")
    out = {}
    for g, v in shares.items():
        x = _finite_or_none(v)
        if x is None or x < 0:
            raise ParameterError(f"The share of group {g!r} in 'group_shares' of {where} must "
                                 f"be a number >= 0. Got {v!r} instead.")
        out[str(g)] = x
    total = sum(out.values())
    if total <= 0:
        raise ParameterError(f"The shares in 'group_shares' of {where} add up to 0; give at "
                             f"least one group a positive share.")
    return {g: x / total for g, x in out.items()}


def _share_slots(ranked, fav, shares, n):
    """Indices taken from ``ranked`` with per-group quotas (largest remainders); slots
    a group cannot fill go to the best remaining rows of any group."""
    exact = {g: shares.get(g, 0.0) * n for g in shares}
    quota = {g: int(math.floor(x)) for g, x in exact.items()}
    left = n - sum(quota.values())
    for g in sorted(exact, key=lambda g: (-(exact[g] - quota[g]), g))[:left]:
        quota[g] += 1
    taken, rest = [], []
    for i in ranked:
        if quota.get(fav[i], 0) > 0:
            quota[fav[i]] -= 1
            taken.append(i)
        else:
            rest.append(i)
    return taken + rest[:max(0, n - len(taken))]


# ======================================================================= building
def build_detectors(selected_rows, encoding, constraints=None, *, group_names, strong=None,
                    weak=None, group_sizes=None, vocabulary=None, effect="cohens_h",
                    absence_after_events=None, absence_after_seconds=None, selection=None,
                    examples=None):
    """Turn selected contrast rows into a detectors document (a plain dict).

    Parameters
    ----------
    selected_rows : DataFrame
        Rows from :func:`select_detectors` (columns ``pattern``, ``favours``,
        ``q_value`` and any of ``p_value``, ``support_<group>``, effect sizes,
        ``stability``).
    encoding : dict
        ``SequenceDB.encoding`` of the analysed data (template, mapping, pause edges...).
    constraints : dict, optional
        Matching constraints the patterns were mined and counted with (``max_gap``,
        ``max_window``, ``skip_pauses``; e.g. ``PatternSet.constraints``).
    group_names : list of str
    strong, weak : str, optional
        Names of the strong and weak group; default ``"strong"``/``"weak"`` when
        present, else the first and second group.
    group_sizes : dict or sequence of int, optional
        Number of sequences per group (stored as evidence).
    vocabulary : list of str, optional
        Action symbols seen offline; the watcher notes live symbols outside it.
    effect : str
        Effect-size column the watcher ranks simultaneous firings by.
    absence_after_events, absence_after_seconds : optional
        Absence rule for encourage detectors (fire when the pattern has not been
        shown after this many events / seconds of a sequence); ``None`` = off.
        ``absence_after_events`` may also be a dict pattern id -> events (one rule
        per detector, e.g. from :func:`absence_thresholds`).
    selection : dict, optional
        The filters used (recorded for provenance).
    examples : dict, optional
        Pattern id -> one excerpt (``{"learner", "group", "events"}``,
        see :func:`seqmine.mining.excerpts.build_examples`), stored as the
        detector's ``example``.

    Returns
    -------
    dict
        A detectors document; :func:`validate_detectors` accepts it.

    Examples
    --------
    >>> rows = pd.DataFrame({"pattern": ["set_light > set_water"], "favours": ["weak"],
    ...                      "q_value": [0.01], "cohens_h": [0.4]})
    >>> doc = build_detectors(rows, {"template": "{action}"}, {"max_gap": 0},
    ...                       group_names=["strong", "weak"])
    >>> d = doc["detectors"][0]
    >>> d["id"], d["tokens"], d["direction"]
    ('D001', ['set_light', 'set_water'], 'discourage')
    """
    where = "build_detectors"
    group_names = [str(g) for g in group_names]
    if len(group_names) < 2:
        raise ParameterError(f"{where} needs at least two group names; got {group_names}.")
    strong, weak = _strong_weak(group_names, strong, weak)
    for role, name in (("strong", strong), ("weak", weak)):
        if name not in group_names:
            raise ParameterError(f"The '{role}' group {name!r} of {where} is not one of the "
                                 f"groups {group_names}.")
    if strong == weak:
        raise ParameterError(f"{where}: the strong and weak group must differ (both {strong!r}).")
    if "pattern" not in selected_rows.columns or "favours" not in selected_rows.columns:
        raise ColumnError(f"{where}: the selected rows need columns 'pattern' and 'favours'.")
    constraints = dict(constraints or {})
    matching = {
        "max_gap": _int_or_none(constraints.get("max_gap")),
        "max_window": _int_or_none(constraints.get("max_window")),
        "skip_pauses": bool(constraints.get("skip_pauses", False)),
    }
    if group_sizes is not None and not isinstance(group_sizes, dict):
        group_sizes = {g: int(n) for g, n in zip(group_names, group_sizes)}
    enc = _plain(copy.deepcopy(dict(encoding)))
    enc.setdefault("template", "{action}")
    enc.setdefault("mapping", {})
    enc.setdefault("collapse_repeats", False)
    enc.setdefault("unit", "learner")
    enc.setdefault("session_gap", None)
    enc.setdefault("pause", {"strategy": "none", "edges": [], "labels": [], "implicit": []})
    pause = enc.get("pause") or {}
    known = set(vocabulary or []) | {PAUSE_PREFIX + lab for lab in pause.get("labels", [])}
    ranges = pause_ranges(enc)
    detectors = []
    for k, row in enumerate(selected_rows.to_dict("records")):
        tokens = pattern_tokens(row, known)
        fav = "" if _is_missing(row.get("favours")) else str(row["favours"]).strip()
        if fav == weak:
            direction = "discourage"
        elif fav == strong:
            direction = "encourage"
        else:
            raise ParameterError(
                f"{where}: row {k} ({row['pattern']!r}) favours {fav or 'no group'!r}, neither "
                f"the strong ({strong!r}) nor the weak ({weak!r}) group; filter it out first.")
        evidence = {
            "support": {g: _finite_or_none(row.get(f"support_{g}")) for g in group_names
                        if f"support_{g}" in row},
            "rate": {g: _finite_or_none(row.get(f"rate_{g}")) for g in group_names
                     if f"rate_{g}" in row},
            "n": dict(group_sizes) if group_sizes else {},
            "p_value": _finite_or_none(row.get("p_value")),
            "q_value": _finite_or_none(row.get("q_value")),
        }
        if not evidence["rate"]:
            del evidence["rate"]
        for col in _EVIDENCE_COLUMNS[2:]:
            if col in row and col != "stability":
                evidence[col] = _finite_or_none(row.get(col))
        if "evidence" in row:
            evidence["kind"] = "" if _is_missing(row["evidence"]) else str(row["evidence"])
        evidence["effects"] = {c: _finite_or_none(row.get(c)) for c in _EFFECT_COLUMNS if c in row}
        evidence["stability"] = _finite_or_none(row.get("stability"))
        shown = {t: ranges[t] for t in tokens if t in ranges}
        if shown:
            evidence["pause_ranges"] = shown
        absence = None
        if direction == "encourage":
            after = absence_after_events
            if isinstance(after, dict):
                after = after.get(_row_id(row, tokens))
            absence = {"after_events": _int_or_none(after),
                       "after_seconds": _finite_or_none(absence_after_seconds)}
        det = {
            "id": f"D{k + 1:03d}",
            "pattern_id": _row_id(row, tokens),
            "tokens": tokens,
            "direction": direction,
            "favours": fav,
            "evidence": evidence,
            "hint": default_hint(tokens, direction, ranges),
            "priority": 1,
            "absence": absence,
            "enabled": True,
        }
        example = (examples or {}).get(_row_id(row, tokens))
        if example:
            det["example"] = _plain(example)
        detectors.append(det)
    sizes = {str(g): int(n) for g, n in (group_sizes or {}).items()}
    doc = {
        "format": DETECTORS_FORMAT,
        "version": DETECTORS_VERSION,
        "notice": DETECTOR_NOTICE,
        "encoding": enc,
        "vocabulary": sorted({str(v) for v in (vocabulary or []) if not str(v).startswith(PAUSE_PREFIX)}),
        "matching": matching,
        "groups": {"names": group_names, "strong": strong, "weak": weak, "sizes": sizes},
        "selection": _plain(dict(selection or {}, effect=effect)),
        "detectors": detectors,
    }
    validate_detectors(doc, source=where)
    return doc


def export_detectors(contrast_table, db, constraints=None, *, max_q=_DEFAULTS["max_q"],
                     min_effect=_DEFAULTS["min_effect"], effect=_DEFAULTS["effect"],
                     min_stability=_DEFAULTS["min_stability"], lengths=None, groups=None,
                     max_detectors=_DEFAULTS["max_detectors"], drop_redundant=True,
                     evidence=DEFAULT_EVIDENCE, strong=None, weak=None,
                     encourage_share=_DEFAULTS["encourage_share"],
                     absence_after_events="auto",
                     absence_quantile=_DEFAULTS["absence_quantile"],
                     absence_after_seconds=None, examples=_DEFAULTS["examples"],
                     random_state=DEFAULT_CONFIG["seed"]):
    """Select rows of a contrast table and build the detectors document in one step.

    Parameters
    ----------
    contrast_table : DataFrame
        Output of ``contrast()``.
    db : SequenceDB
        The database the patterns were mined on (gives the encoding, group names and
        sizes, the offline vocabulary, the examples and the absence rules).
    constraints : dict, optional
        ``PatternSet.constraints`` of the mined patterns.
    max_q, min_effect, effect, min_stability, lengths, groups, max_detectors, drop_redundant
    evidence
        See :func:`select_detectors`.
    strong, weak, absence_after_seconds
        See :func:`build_detectors`.
    encourage_share : float in [0, 1] or None, default 0.5
        Share of the ``max_detectors`` slots for encourage detectors (patterns more
        common in the strong group); the rest go to discourage detectors, and slots
        one direction cannot fill go to the other. ``None``: no balance, the best
        rows whatever their direction.
    absence_after_events : int, None or "auto", default "auto"
        Absence rule of encourage detectors: ``"auto"`` derives one per detector from
        the data (:func:`absence_thresholds` with ``absence_quantile``), an int is
        used for every encourage detector, ``None`` switches it off.
    absence_quantile : float in (0, 1], default 0.75
    examples : bool, default True
        Store one short excerpt per detector (from a sequence of the favoured group).
    random_state : int, default 20261202
        Seed of the order in which sequences are searched for examples.

    Returns
    -------
    dict
        A valid detectors document (write it with :func:`save_detectors`).
    """
    where = "export_detectors"
    strong, weak = _strong_weak(db.group_names, strong, weak)
    shares = None
    if encourage_share is not None:
        share = check_number(encourage_share, "encourage_share", where, minimum=0)
        if share > 1:
            raise ParameterError(f"The 'encourage_share' parameter of {where} must be in "
                                 f"[0, 1]. Got {share!r} instead.")
        shares = {strong: share, weak: 1.0 - share}
    selection = {"max_q": max_q, "min_effect": min_effect, "min_stability": min_stability,
                 "lengths": list(lengths) if isinstance(lengths, (tuple, list)) else lengths,
                 "groups": groups, "max_detectors": max_detectors,
                 "drop_redundant": drop_redundant,
                 "evidence": None if evidence is None else _check_evidence(evidence,
                                                                           "export_detectors")}
    rows = select_detectors(contrast_table, effect=effect, group_shares=shares,
                            **dict(selection, lengths=lengths))
    selection.update(encourage_share=encourage_share,
                     ranking="|effect|, then q_value" if evidence is None
                     else "q of the evidence test, then |effect|")
    constraints = dict(constraints or {})
    match_kw = {"max_gap": _int_or_none(constraints.get("max_gap")),
                "max_window": _int_or_none(constraints.get("max_window")),
                "skip_pauses": bool(constraints.get("skip_pauses", False))}
    records = rows.to_dict("records")
    known = set(db.vocab)
    tokens = [pattern_tokens(r, known) for r in records]
    ids = [_row_id(r, t) for r, t in zip(records, tokens)]
    favours = [("" if _is_missing(r.get("favours")) else str(r["favours"]).strip())
               for r in records]
    after = absence_after_events
    if isinstance(after, str):
        if after != "auto":
            raise ParameterError(f"The 'absence_after_events' parameter of {where} must be "
                                 f"a whole number, None or 'auto'. Got {after!r} instead.")
        enc = [k for k, f in enumerate(favours) if f == strong]
        points = absence_thresholds(db, [tokens[k] for k in enc], [favours[k] for k in enc],
                                    quantile=absence_quantile, **match_kw)
        after = {ids[k]: p for k, p in zip(enc, points) if p is not None}
        selection["absence"] = f"auto (quantile {absence_quantile:g})"
    else:
        selection["absence"] = after
    excerpts = None
    if examples and records:
        found = build_examples(db, tokens, favours=favours, per_pattern=1, context=1,
                               max_span=8, random_state=random_state, **match_kw)["patterns"]
        excerpts = {i: (found.get(pattern_id(t)) or [None])[0] for i, t in zip(ids, tokens)}
    return build_detectors(
        rows, db.encoding, constraints, group_names=db.group_names, strong=strong, weak=weak,
        group_sizes=[len(set(db.learners[db.groups == g].tolist()))
                     for g in range(len(db.group_names))],
        vocabulary=[v for v, p in zip(db.vocab, db.is_pause) if not p], effect=effect,
        absence_after_events=after, absence_after_seconds=absence_after_seconds,
        selection=selection, examples=excerpts)


def absence_thresholds(db, patterns, favours, *, quantile=ABSENCE_QUANTILE, max_gap=None,
                       max_window=None, skip_pauses=False):
    """Per pattern, the action events by which most learners who showed it had shown it.

    For each pattern, every sequence of its favoured group that contains it is
    searched for the earliest-ending occurrence (the semantics of
    :mod:`seqmine.mining.patterns`); the number of action events (pause tokens not
    counted) up to and including its last token is the sequence's *first-completion
    point*. The threshold is the ``quantile`` of these points, rounded up: by then
    that share of the favoured group's learners who ever showed the pattern had
    shown it, so a learner who has not is late. An encourage detector's absence rule
    fires there. The watcher counts the events of a sequence after the action
    mapping, so the two agree unless repeated actions are collapsed.

    Parameters
    ----------
    db : SequenceDB
    patterns : list of (list of str or str)
        Patterns as token lists, or as readable text (tokens joined by ``" > "``).
    favours : list of str
        Favoured group of each pattern.
    quantile : float in (0, 1], default 0.75
    max_gap, max_window, skip_pauses
        Matching constraints of the patterns.

    Returns
    -------
    list
        Per pattern, a whole number of events, or None when no sequence of its group
        contains it.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a", "b", "c"], ["c", "c", "a", "b"], ["b", "a"]],
    ...                            groups=["s", "s", "w"])
    >>> absence_thresholds(db, [["a", "b"], "b > a"], ["s", "s"], quantile=0.5, max_gap=0)
    [3, None]
    """
    quantile = check_number(quantile, "quantile", "absence_thresholds", minimum=0, strict=True)
    if quantile > 1:
        raise ParameterError(f"The 'quantile' parameter of absence_thresholds must be in "
                             f"(0, 1]. Got {quantile!r} instead.")
    index = {v: i for i, v in enumerate(db.vocab)}
    groups = np.asarray(db.groups)
    out = []
    for pat, fav in zip(patterns, favours):
        toks = split_readable(pat, set(index))
        out.append(None)
        if any(t not in index for t in toks) or fav not in db.group_names:
            continue
        ids = [index[t] for t in toks]
        points = []
        for s in np.flatnonzero(groups == db.group_names.index(fav)):
            seq = db.sequence(int(s))
            pos = find_occurrence(seq, ids, db.is_pause, max_gap=max_gap,
                                  max_window=max_window, skip_pauses=skip_pauses)
            if pos is not None:
                points.append(int(np.sum(~db.is_pause[seq[:pos[-1] + 1]])))
        if points:
            out[-1] = int(math.ceil(np.quantile(points, quantile)))
    return out


def default_hint(tokens, direction, pause_ranges=None):
    """Neutral placeholder hint text for a detector (to be rewritten by educators).

    ``pause_ranges`` (token -> range text, see
    :func:`seqmine.encoding.pauses.pause_ranges`) puts each pause's range beside it.

    Examples
    --------
    >>> default_hint(["set_light", "pause:long", "reset"], "discourage",
    ...              {"pause:long": "17 s or more"})
    "Suggest (review before use): the sequence 'set_light, long pause (17 s or more), reset' was more common among weak learners; consider prompting a different next step."
    """
    words = ", ".join(_readable(t, pause_ranges) for t in tokens)
    if direction == "discourage":
        return (f"Suggest (review before use): the sequence '{words}' was more common among "
                f"weak learners; consider prompting a different next step.")
    return (f"Suggest (review before use): the sequence '{words}' was more common among "
            f"strong learners; consider prompting the learner to try it.")


# ======================================================================= storage
def save_detectors(detectors, path):
    """Validate ``detectors`` and write them to ``path`` as plain, sorted JSON.

    Returns
    -------
    pathlib.Path
    """
    path = Path(path)
    validate_detectors(detectors, source=str(path))
    text = json.dumps(_plain(detectors), indent=2, ensure_ascii=False, allow_nan=False)
    path.parent.mkdir(parents=True, exist_ok=True)
    with open_new(path) as fh:
        fh.write(text + "\n")
    return path


def load_detectors(path):
    """Read and validate a detectors file.

    Raises
    ------
    DataFileError
        With a one-line message naming the file, the field (and detector index) and
        the fix, when the file is missing, not JSON, of another format or a newer
        version, or edited into an invalid state.

    Returns
    -------
    dict
    """
    path = Path(path)
    if not path.is_file():
        raise DataFileError(f"{path}: detectors file not found; create one with 'seqmine detectors'.")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise DataFileError(f"{path}: not UTF-8 text; save the detectors file as UTF-8 JSON.") from None
    try:
        doc = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise DataFileError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: "
                            f"{exc.msg}); fix the file or export it again.") from None
    except ValueError as exc:
        raise DataFileError(f"{path}: {' '.join(str(exc).split())}; write null (or a "
                            f"number) instead.") from None
    except RecursionError:
        raise DataFileError(f"{path}: the JSON is nested too deeply to be a detectors file; "
                            f"export it again with 'seqmine detectors'.") from None
    validate_detectors(doc, source=str(path))
    return doc


def validate_detectors(doc, *, source="detectors"):
    """Check a detectors document against the schema; raise DataFileError if invalid.

    Every message is one line naming ``source``, the field (with the detector index)
    and the fix.

    Examples
    --------
    >>> validate_detectors({"format": "seqmine-detectors", "version": 9})
    Traceback (most recent call last):
    ...
    seqmine.errors.DataFileError: detectors: version 9 is newer than this seqmine reads (version 2); upgrade seqmine or export the detectors again.
    """
    def fail(field, msg):
        raise DataFileError(f"{source}: {field}: {msg}" if field else f"{source}: {msg}")

    if not isinstance(doc, dict):
        fail("", "the file must hold a JSON object; export it again with 'seqmine detectors'.")
    if doc.get("format") != DETECTORS_FORMAT:
        fail("format", f"is {doc.get('format')!r}, expected {DETECTORS_FORMAT!r}; this is not "
                       f"a seqmine detectors file.")
    version = doc.get("version")
    if not _is_int(version) or version < 1:
        fail("version", f"{version!r} is not a detectors file version; expected "
                        f"{DETECTORS_VERSION}.")
    if version > DETECTORS_VERSION:
        fail("", f"version {version} is newer than this seqmine reads (version "
                 f"{DETECTORS_VERSION}); upgrade seqmine or export the detectors again.")
    _unknown_keys(doc, _TOP_KEYS, "", fail)
    for key in ("encoding", "matching", "detectors"):
        if key not in doc:
            fail(key, "is missing; export the detectors again with 'seqmine detectors'.")
    labels, implicit = _validate_encoding(doc["encoding"], fail)
    m = doc["matching"]
    if not isinstance(m, dict):
        fail("matching", "must be an object with max_gap, max_window and skip_pauses.")
    _unknown_keys(m, _MATCHING_KEYS, "matching", fail)
    if m.get("max_gap") is not None and (not _is_int(m["max_gap"]) or m["max_gap"] < 0):
        fail("matching.max_gap", f"{m['max_gap']!r} must be an integer >= 0 or null (no limit).")
    if m.get("max_window") is not None and (not _is_int(m["max_window"]) or m["max_window"] < 1):
        fail("matching.max_window", f"{m['max_window']!r} must be an integer >= 1 or null (no limit).")
    if not isinstance(m.get("skip_pauses", False), bool):
        fail("matching.skip_pauses", f"{m['skip_pauses']!r} must be true or false.")
    if "vocabulary" in doc and (not isinstance(doc["vocabulary"], list)
                                or not all(isinstance(v, str) for v in doc["vocabulary"])):
        fail("vocabulary", "must be a list of action symbols (strings).")
    for key in ("groups", "selection"):
        if key in doc and not isinstance(doc[key], dict):
            fail(key, "must be an object.")
    dets = doc["detectors"]
    if not isinstance(dets, list):
        fail("detectors", "must be a list of detector objects.")
    pause_ok = {PAUSE_PREFIX + lab for lab in labels if lab not in implicit}
    seen = {}
    for k, d in enumerate(dets):
        _validate_detector(d, k, pause_ok, labels, seen, fail)
    return doc


# ====================================================================== internals
def _validate_encoding(enc, fail):
    if not isinstance(enc, dict):
        fail("encoding", "must be an object (the encoding of the analysed sequences).")
    tpl = enc.get("template", "{action}")
    if not isinstance(tpl, str):
        fail("encoding.template", f"{tpl!r} must be a string such as '{{action}}'.")
    try:
        parts = [(f, spec, conv) for _l, f, spec, conv in string.Formatter().parse(tpl)
                 if f is not None]
    except ValueError:
        fail("encoding.template", f"{tpl!r} is malformed; use fields like '{{action}}:{{target}}'.")
    fields = [f for f, _s, _c in parts]
    if any(spec or conv for _f, spec, conv in parts):
        fail("encoding.template", f"{tpl!r} uses a format spec or conversion; write plain "
                                  f"fields such as '{{action}}:{{target}}'.")
    bad = [f for f in fields if f not in _TEMPLATE_FIELDS]
    if bad or "action" not in fields:
        fail("encoding.template", f"{tpl!r} must use {{action}} and only the fields "
                                  f"{', '.join('{' + f + '}' for f in _TEMPLATE_FIELDS)}.")
    mapping = enc.get("mapping") or {}
    if not isinstance(mapping, dict) or not all(
            isinstance(k, str) and isinstance(v, str) for k, v in mapping.items()):
        fail("encoding.mapping", "must be an object mapping action names to symbols "
                                 "(\"\" drops the action).")
    if not isinstance(enc.get("collapse_repeats", False), bool):
        fail("encoding.collapse_repeats", f"{enc['collapse_repeats']!r} must be true or false.")
    unit = enc.get("unit", "learner")
    if unit not in ("learner", "session"):
        fail("encoding.unit", f"{unit!r} must be 'learner' or 'session'.")
    gap = enc.get("session_gap")
    if gap is not None and not (_is_finite_real(gap) and gap > 0):
        fail("encoding.session_gap", f"{gap!r} must be a number of seconds > 0 or null.")
    clock = enc.get("time", {})
    if not isinstance(clock, dict) or clock.get("unit", "s") not in ("s", "ms", "us") or not (
            clock.get("timezone") is None or isinstance(clock.get("timezone"), str)):
        fail("encoding.time", "must be an object with unit ('s', 'ms' or 'us') and timezone "
                              "(an IANA name or null).")
    pause = enc.get("pause", {"strategy": "none"})
    if not isinstance(pause, dict):
        fail("encoding.pause", "must be an object with strategy, edges, labels and implicit.")
    strategy = pause.get("strategy", "none")
    if strategy not in _PAUSE_STRATEGIES:
        fail("encoding.pause.strategy", f"{strategy!r} must be one of {', '.join(_PAUSE_STRATEGIES)}.")
    edges = pause.get("edges", [])
    labels = pause.get("labels", [])
    implicit = pause.get("implicit", [])
    if not isinstance(edges, list) or not all(_is_finite_real(e) for e in edges):
        fail("encoding.pause.edges", "must be a list of finite numbers of seconds.")
    # quantile edges of tied gaps can be equal (the bin between them stays empty);
    # hand-set (fixed) edges must be strictly ascending, as the Encoder requires
    if any(b < a or (b == a and strategy == "fixed") for a, b in zip(edges, edges[1:])):
        fail("encoding.pause.edges", f"{edges} must be strictly ascending.")
    if not isinstance(labels, list) or not all(isinstance(x, str) and x for x in labels):
        fail("encoding.pause.labels", "must be a list of non-empty bin names.")
    if len(set(labels)) != len(labels):
        fail("encoding.pause.labels", f"{labels} has a repeated name; bin names must differ.")
    if strategy == "none":
        if labels:
            fail("encoding.pause.labels", "must be empty when the pause strategy is 'none'.")
    elif len(labels) != len(edges) + 1:
        fail("encoding.pause.labels", f"has {len(labels)} names for {len(edges)} edges; "
                                      f"n edges need n + 1 bin names.")
    if not isinstance(implicit, list) or any(x not in labels for x in implicit):
        fail("encoding.pause.implicit", f"{implicit!r} must list bin names from labels {labels}.")
    return labels, implicit


def _validate_detector(d, k, pause_ok, labels, seen, fail):
    at = f"detectors[{k}]"
    if not isinstance(d, dict):
        fail(at, "must be an object with id, tokens, direction, hint and priority.")
    _unknown_keys(d, _DETECTOR_KEYS, at, fail)
    for key in ("id", "tokens", "direction"):
        if key not in d:
            fail(f"{at}.{key}", "is missing; every detector needs id, tokens and direction.")
    did = d["id"]
    if not isinstance(did, str) or not did.strip():
        fail(f"{at}.id", f"{did!r} must be a non-empty string.")
    if _UNSAFE_ID.search(did) or did != did.strip() or len(did) > MAX_ID_LENGTH:
        fail(f"{at}.id", f"{did!r} must be at most {MAX_ID_LENGTH} printable characters "
                         f"without control characters or surrounding spaces (it is printed "
                         f"on terminals), e.g. 'D001' or 'too-many-resets'.")
    pid = d.get("pattern_id")
    if pid is not None and (not isinstance(pid, str) or _UNSAFE_ID.search(pid)):
        fail(f"{at}.pattern_id", f"{pid!r} must be a pattern id from patterns.csv or null.")
    if did in seen:
        fail(f"{at}.id", f"{did!r} is also the id of detectors[{seen[did]}]; ids must be unique.")
    seen[did] = k
    toks = d["tokens"]
    if not isinstance(toks, list) or not toks:
        fail(f"{at}.tokens", "must be a non-empty list of token names.")
    for j, t in enumerate(toks):
        if not isinstance(t, str) or not t:
            fail(f"{at}.tokens[{j}]", f"{t!r} must be a non-empty string.")
        if t.startswith(PAUSE_PREFIX) and t not in pause_ok:
            lab = t[len(PAUSE_PREFIX):]
            why = ("is an implicit pause bin (never emitted as a token)" if lab in labels
                   else f"is not a pause bin of this encoding (bins: {', '.join(labels) or 'none'})")
            fail(f"{at}.tokens[{j}]", f"{t!r} {why}; remove it or fix encoding.pause.")
    direction = d["direction"]
    if direction not in ("discourage", "encourage"):
        fail(f"{at}.direction", f"{direction!r} must be 'discourage' or 'encourage'.")
    if "hint" in d and not isinstance(d["hint"], str):
        fail(f"{at}.hint", "must be a string (the hint text shown to learners).")
    if "notes" in d and not isinstance(d["notes"], str):
        fail(f"{at}.notes", "must be a string.")
    if "favours" in d and d["favours"] is not None and not isinstance(d["favours"], str):
        fail(f"{at}.favours", "must be a group name or null.")
    pr = d.get("priority", 1)
    if not _is_int(pr) or pr < 0:
        fail(f"{at}.priority", f"{pr!r} must be an integer >= 0 (smaller = delivered first).")
    if not isinstance(d.get("enabled", True), bool):
        fail(f"{at}.enabled", f"{d['enabled']!r} must be true or false.")
    if "evidence" in d and d["evidence"] is not None and not isinstance(d["evidence"], dict):
        fail(f"{at}.evidence", "must be an object.")
    if d.get("example") is not None and not isinstance(d["example"], dict):
        fail(f"{at}.example", "must be an object (one excerpt) or null.")
    ab = d.get("absence")
    if ab is not None:
        if not isinstance(ab, dict) or set(ab) - {"after_events", "after_seconds"}:
            fail(f"{at}.absence", "must be null or an object with after_events and after_seconds.")
        ev, sec = ab.get("after_events"), ab.get("after_seconds")
        if ev is not None and (not _is_int(ev) or ev < 1):
            fail(f"{at}.absence.after_events", f"{ev!r} must be an integer >= 1 or null.")
        if sec is not None and not (_is_finite_real(sec) and sec > 0):
            fail(f"{at}.absence.after_seconds", f"{sec!r} must be a number > 0 or null.")
        if direction == "discourage" and (ev is not None or sec is not None):
            fail(f"{at}.absence", "absence rules apply to encourage detectors only; set it "
                                  "to null or change the direction.")


def _unknown_keys(obj, allowed, at, fail):
    for key in obj:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), sorted(allowed), n=1, cutoff=0.6)
            hint = f"did you mean {close[0]!r}?" if close else f"allowed: {', '.join(sorted(allowed))}."
            fail(f"{at}.{key}" if at else str(key), f"unknown field; {hint}")


def _row_id(row, tokens):
    """The row's ``pattern_id`` (tables before pattern ids: computed from the tokens)."""
    pid = row.get("pattern_id")
    if isinstance(pid, str) and pid.strip():
        return pid.strip()
    return pattern_id(tokens)


def _length_mask(lens, lengths):
    if isinstance(lengths, numbers.Integral):
        return lens == int(lengths)
    if isinstance(lengths, tuple) and len(lengths) == 2:
        lo, hi = lengths
        lo = 1 if lo is None else lo
        hi = np.inf if hi is None else hi
        return (lens >= lo) & (lens <= hi)
    try:
        allowed = {int(x) for x in lengths}
    except (TypeError, ValueError):
        raise ParameterError(f"The 'lengths' parameter of select_detectors must be an int, a "
                             f"(min, max) tuple or a list of ints. Got {lengths!r} instead.") from None
    return np.isin(lens, sorted(allowed))


def _readable(token, ranges=None):
    if token.startswith(PAUSE_PREFIX):
        words = f"{token[len(PAUSE_PREFIX):].replace('_', ' ')} pause"
        span = (ranges or {}).get(token)
        return f"{words} ({span})" if span else words
    return token


def _strong_weak(group_names, strong=None, weak=None):
    names = [str(g) for g in group_names]
    if len(names) < 2:
        raise ParameterError(f"Detectors need at least two groups; got {names}.")
    strong = strong if strong is not None else ("strong" if "strong" in names else names[0])
    weak = weak if weak is not None else ("weak" if "weak" in names else names[1])
    return strong, weak


def _is_missing(v):
    return v is None or (isinstance(v, float) and math.isnan(v))


def _finite_or_none(v):
    """A finite float or None (JSON has no NaN/inf)."""
    if v is None or isinstance(v, bool):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _int_or_none(v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    return int(v)


def _is_int(v):
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


def _is_finite_real(v):
    """True for a finite real number (not a boolean, not a string), as the schema wants."""
    return (isinstance(v, numbers.Real) and not isinstance(v, bool)
            and math.isfinite(float(v)))


def _plain(obj):
    """Convert numpy scalars/arrays inside ``obj`` to plain JSON types."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_plain(v) for v in obj.tolist()]
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return _finite_or_none(obj)
    return obj


def _reject_constant(name):
    raise ValueError(f"the JSON holds {name}, which is not plain JSON")
