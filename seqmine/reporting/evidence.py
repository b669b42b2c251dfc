"""Report pieces about what the data support (private; see :mod:`seqmine.reporting.render`).

The first screen's activity and survival lines, the grouping of findings by evidence
(order, presence beyond volume, volume only), the table of single actions and pause
kinds ("what each group does more of"), and the wording on units, stability and
replication. Every data-derived string is escaped with :func:`~.html.esc`.
"""

from __future__ import annotations

import math

import numpy as np

from .html import (
    _as_float,
    _chip,
    _fmt,
    _fmt_p,
    _group_label,
    _int,
    _is_finite,
    _pct,
    _table,
    esc,
)

__all__ = ["EVIDENCE_KINDS", "activity_lines", "survival_lines", "unit_lines",
           "findings_by_evidence", "evidence_q", "tokens_table", "STABILITY_TEXT"]

#: Evidence groups of the report: (value of the ``evidence`` column, title, reading).
EVIDENCE_KINDS = [
    ("order", "Order",
     "Among learners who have every item of the pattern, the groups differ in how often "
     "the items come in this order, beyond how often the items occur and how active the "
     "learners were. These are findings about ways of working."),
    ("presence", "Presence beyond activity",
     "The groups differ in whether learners show the pattern at all, also when learners "
     "of equal activity are compared, but not in the order of its items: doing (or "
     "avoiding) these actions matters, their order here does not add evidence."),
    ("volume", "Activity only",
     "More common in one group before the adjustment, but not when learners of equal "
     "activity are compared: the more active group simply had more chances to show "
     "these patterns. They describe how much learners did, not how they worked."),
]

#: How stability and replication are to be read (report and docs say the same).
STABILITY_TEXT = (
    "<b>Stability</b> is the share of bootstrap resamples of the same learners in which "
    "the pattern again differs (uncorrected); it shows whether a finding rests on a few "
    "learners, not whether it would hold for new ones. <b>Replication</b> is the share "
    "of random splits of the learners into two halves in which the finding's own test "
    "is significant in both halves, in the same direction: found in one half, confirmed "
    "in the other. With half the learners each half has less power, so a real but "
    "moderate difference can replicate in well under half of the splits; a chance "
    "finding rarely replicates. Neither is a probability that the finding is true, and "
    "neither replaces a check on new learners.")


def evidence_q(df):
    """q value of each row's own evidence test (``q_order`` for order, ``q_volume``
    for presence, ``q_value`` otherwise)."""
    q = df["q_value"].to_numpy(float) if "q_value" in df.columns else np.full(len(df), np.nan)
    if "evidence" not in df.columns:
        return q
    ev = df["evidence"].astype(str).to_numpy()
    for kind, col in (("order", "q_order"), ("presence", "q_volume")):
        if col in df.columns:
            q = np.where(ev == kind, df[col].to_numpy(float), q)
    return q


def findings_by_evidence(df, n):
    """``[(kind, title, reading, rows, total)]``: per evidence kind, the first ``n`` rows
    by their own q value (then p value, then pattern), and how many there are."""
    if "evidence" not in df.columns:
        return []
    keyed = df.assign(_q=evidence_q(df),
                      _p=df["p_value"] if "p_value" in df.columns else np.nan,
                      _name=df["pattern"].astype(str))
    out = []
    for kind, title, reading in EVIDENCE_KINDS:
        rows = keyed[keyed["evidence"].astype(str) == kind]
        rows = rows.sort_values(["_q", "_p", "_name"], kind="mergesort", na_position="last")
        out.append((kind, title, reading, rows.drop(columns=["_q", "_p", "_name"]).head(n),
                    len(rows)))
    return out


def activity_differs(summary):
    """True when the run's activity test found the groups differ (p <= 0.05)."""
    act = summary.get("activity") if isinstance(summary, dict) else None
    p = act.get("p_value") if isinstance(act, dict) else None
    return _is_finite(p) and _as_float(p) <= 0.05


def activity_lines(summary, groups):
    """First-screen lines: how much the groups differ in activity, with the test."""
    act = summary.get("activity")
    if not isinstance(act, dict):
        return []
    events = act.get("events_per_learner") or {}
    tokens = act.get("tokens_per_learner") or {}
    parts = []
    for g in groups:
        e = events.get(g) or {}
        t = tokens.get(g) or {}
        if _is_finite(e.get("mean")):
            parts.append(f"{_group_label(g, groups)} {_fmt(e['mean'], 1)} events"
                         + (f" ({_fmt(t['mean'], 1)} tokens)" if _is_finite(t.get("mean")) else ""))
    if not parts:
        return []
    line = "Activity per learner (mean): " + "; ".join(parts) + "."
    p = act.get("p_value")
    if _is_finite(p):
        test = esc(act.get("test") or "test")
        ratio = act.get("ratio_of_means")
        line += (f" Ratio of means {_fmt(ratio, 2)}; " if _is_finite(ratio) else " ") \
            + f"{test}: p {_p_text(p)}."
        if activity_differs(summary):
            line += (" <b>The groups differ in how much they did</b>: a more active group "
                     "has more chances to show any pattern, so compare the counts after "
                     "the volume adjustment below.")
        else:
            line += " No clear difference in how much the groups did."
    return [line]


def survival_lines(summary, alpha):
    """First-screen lines: how many findings survive each adjustment."""
    surv = summary.get("patterns_surviving")
    if not isinstance(surv, dict):
        return []
    by = summary.get("patterns_by_evidence") or {}
    line = (f"Patterns that differ (q ≤ {alpha:g}): {_int(surv.get('before_adjustment', 0))} "
            f"before adjustment, {_int(surv.get('volume_adjusted', 0))} at equal activity "
            f"(volume-adjusted), {_int(surv.get('order', 0))} in the order of their items.")
    if by:
        line += (f" By what the data support: {_int(by.get('order', 0))} order, "
                 f"{_int(by.get('presence', 0))} presence beyond activity, "
                 f"{_int(by.get('volume', 0))} activity only.")
        counts = [by.get(k) for k in ("order", "presence", "volume")]
        n_by = sum(c for c in counts if isinstance(c, (int, float)))
        if n_by > int(surv.get("before_adjustment", 0) or 0):
            # an adjusted test can find what the raw one missed (the adjustment takes
            # activity's share of the variation out); say so, or the counts look wrong
            line += (" Each test is corrected on its own, so a pattern can pass the "
                     "adjusted or the order test without passing the raw one.")
    return [line]


def _p_text(p):
    text = _fmt_p(p)
    return text if text.startswith("&lt;") else f"= {text}"


def unit_lines(summary):
    """Warning lines when tests counted sessions as independent units."""
    unit = summary.get("unit_of_analysis")
    warnings = summary.get("warnings") or []
    codes = {w.get("code") for w in warnings if isinstance(w, dict)}
    if unit == "sequence" and "sessions_not_independent" in codes:
        return ['<span class="warn">These are <b>session-level tests</b>: each session '
                "counted as an independent unit although learners have several, which "
                "overstates the evidence. Re-run with learners as the unit "
                "(<code>--contrast-unit learner</code>, the default).</span>"]
    return []


def tokens_table(df, groups, alpha, n=30):
    """Table of single actions and pause kinds: shares, rates and their tests."""
    if df is None or df.empty or "pattern" not in df.columns:
        return ""
    df = df.assign(_q=df["q_rate"] if "q_rate" in df.columns else np.nan,
                   _name=df["pattern"].astype(str))
    df = df.sort_values(["_q", "_name"], kind="mergesort", na_position="last").head(n)
    heads = ["token", "kind"]
    for g in groups:
        heads += [f"share {g}", f"per 100 tokens {g}"]
    heads += ["q (rates)", "q (presence, volume-adjusted)", "more in", "evidence"]
    rows = []
    for _, r in df.iterrows():
        row = [_chip(r["pattern"]), esc(r.get("kind", ""))]
        for g in groups:
            row += [_pct(r.get(f"support_{g}")), _fmt(r.get(f"rate_{g}"), 2)]
        q_rate = _as_float(r.get("q_rate"))
        more = ""
        if math.isfinite(q_rate) and q_rate <= alpha and len(groups) >= 2:
            rates = [(_as_float(r.get(f"rate_{g}")), g) for g in groups]
            more = _group_label(max(rates)[1], groups)
        row += [_fmt_p(r.get("q_rate")), _fmt_p(r.get("q_volume")), more,
                esc(r.get("evidence", "") or "")]
        rows.append(row)
    return _table(heads, rows, raw_cells=False,
                  num_cols=tuple(range(2, 2 + 2 * len(groups) + 2)))
