"""The report's "Data checks" box and the pause ranges shown beside pause tokens (private).

The box opens the report, above any finding: it lists every warning the run recorded
in ``summary.json`` (``warnings``: code, message, count), then how the times were read
and what a sequence is, so a reader sees what the tool assumed before reading what
it found. Every string from the files passes through :func:`~seqmine.reporting.html.esc`.
"""

from __future__ import annotations

import math

from ..encoding.pauses import format_seconds, pause_ranges
from .html import _int, esc, esc_message

__all__ = ["data_checks_box", "report_pause_ranges", "DATA_CHECKS_CSS"]

DATA_CHECKS_CSS = """\
.checks { border:1px solid var(--warm); border-left-width:5px; background:#fffaf3;
  border-radius:6px; padding:8px 14px; margin:14px 0; }
.checks.clean { border-color: var(--line); border-left-color: var(--accent); background:#fff; }
.checks ul { margin: 4px 0 6px; padding-left: 20px; }
.checks li { margin-bottom: 4px; max-width: 90ch; }
.checks code { font-size: 12.5px; color: var(--warm); }
.tok small.range { color: var(--muted); font-size: 11px; margin-left: 4px; }
"""


def data_checks_box(d):
    """HTML of the Data checks box from the report inputs ``d`` (see render)."""
    summary = d["summary"].value or {}
    records = summary.get("warnings")
    items = []
    if isinstance(records, list):
        for w in records:
            if not isinstance(w, dict):
                continue
            count = w.get("count")
            n = (f" <small>({_int(count)})</small>" if isinstance(count, (int, float))
                 and not isinstance(count, bool) and math.isfinite(count) else "")
            items.append(f"<li><code>{esc(w.get('code', ''))}</code> "
                         f"{esc_message(w.get('message', ''), max_chars=1200)}{n}</li>")
    facts = _facts(summary)
    if items:
        head = (f"<b>Data checks</b>: {len(items)} thing(s) the run assumed or could not "
                f"tell; read them before the findings.")
        body = "<ul>" + "".join(items) + "</ul>"
        cls = "checks"
    elif isinstance(records, list):
        head = "<b>Data checks</b>: no warnings were raised while reading and encoding the data."
        body = ""
        cls = "checks clean"
    else:
        head = "<b>Data checks</b>: this run recorded no warnings list (older summary.json)."
        body = ""
        cls = "checks clean"
    tail = f"<p>{' '.join(facts)}</p>" if facts else ""
    return f'<div class="{cls}" id="data-checks">{head}{body}{tail}</div>'


def report_pause_ranges(d):
    """``{pause token: range text}`` from summary.json (or the detectors file)."""
    summary = d["summary"].value or {}
    enc = summary.get("encoding") if isinstance(summary.get("encoding"), dict) else None
    if enc is None:
        det = d["detectors"].value if "detectors" in d else None
        enc = det.get("encoding") if isinstance(det, dict) else None
        enc = enc if isinstance(enc, dict) else None
    if enc is None and isinstance(summary.get("pause_edges_seconds"), list):
        enc = {"pause": {"edges": summary.get("pause_edges_seconds"),
                         "labels": summary.get("pause_labels") or []}}
    try:
        return pause_ranges(enc or {})
    except (TypeError, ValueError, AttributeError):  # an edited file of another shape
        return {}


def _facts(summary):
    """Sentences on how times were read and what a sequence is."""
    out = []
    clock = summary.get("clock")
    if isinstance(clock, dict):
        res = clock.get("resolution")
        share = clock.get("tied_share")
        unit = {"s": "seconds", "ms": "milliseconds", "us": "microseconds"}.get(
            clock.get("time_unit"))
        bits = []
        if isinstance(res, str):
            bits.append(f"times are recorded to the {esc(res)}")
        if isinstance(share, (int, float)) and math.isfinite(share):
            bits.append(f"{100 * share:.0f}% of a learner's consecutive events share a time")
        if unit and summary.get("time_kind") == "numeric":
            bits.append(f"numbers were read as {unit}")
        if clock.get("timezone"):
            bits.append(f"times without a zone were read in {esc(clock['timezone'])}")
        if bits:
            out.append("Clock: " + "; ".join(bits) + ".")
    enc = summary.get("encoding")
    if isinstance(enc, dict):
        gap = enc.get("session_gap")
        if enc.get("unit") == "session":
            rule = (f"a new sequence starts after {format_seconds(gap)} without an action"
                    if isinstance(gap, (int, float)) else "sequences follow the session column")
            n_seq, n_l = summary.get("sequences"), summary.get("learners")
            counts = (f" ({_int(n_seq)} sequences from {_int(n_l)} learners)"
                      if isinstance(n_seq, int) and isinstance(n_l, int) else "")
            out.append(f"Sequences: {rule}{counts}; each learner counts once in the tests.")
        elif enc.get("unit") == "learner":
            out.append("Sequences: one per learner.")
    return out
