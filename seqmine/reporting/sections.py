"""The sections of the HTML report (private; see :mod:`seqmine.reporting.render`).

Each ``section_*`` function takes the inputs read by :mod:`seqmine.reporting.render` and
returns HTML. Every data-derived string is escaped with
:func:`seqmine.reporting.html.esc`.
"""

from __future__ import annotations

import json
import math

import numpy as np

from . import plots as _plots
from .datachecks import data_checks_box
from .html import (
    _CORRECTIONS,
    _SECTIONS,
    _as_float,
    _chips,
    _describe_grouping,
    _five_numbers,
    _fmt,
    _fmt_p,
    _group_label,
    _h2,
    _int,
    _is_finite,
    _matrix,
    _missing,
    _ordered,
    _pct,
    _plural,
    _section,
    _significant,
    _str_list,
    _table,
    config_of,
    counts_of,
    esc,
    esc_message,
    row_excerpts,
    PATTERN_SEPARATOR,
    row_tokens,
    lookup,
    top_patterns,
)
from .evidence import (
    STABILITY_TEXT,
    activity_lines,
    findings_by_evidence,
    survival_lines,
    tokens_table,
    unit_lines,
)
from .prediction import prediction_glance, section_prediction
from .pieces import (
    _detector_card,
    _group_table,
    _occupancy,
    _pattern_card,
    _pause_bins,
    _rejects,
    _state_selection,
    _transition_figure,
    _transition_table,
)

__all__ = ["section_intro", "section_overview", "section_patterns", "section_tokens",
           "section_transitions",
           "section_phases", "phase_model", "section_prediction", "section_detectors",
           "section_method", "section_cautions"]

def section_intro(d):
    """Title, how to read, contents and the key numbers."""
    toc = "".join(f'<li><a href="#{sid}">{title}</a></li>' for sid, title in _SECTIONS)
    out = ['<header id="top">', "<h1>Behaviour patterns and outcomes</h1>",
           '<p class="lead">Which ordered ways of working were more common among learners '
           "in one outcome group than in another, how they unfold over time, and how early a "
           "struggling learner can be recognised. Every number here is read from the files "
           "in this folder.</p>", f'<nav class="toc"><b>Contents</b><ol>{toc}</ol></nav>']
    out.append(data_checks_box(d))  # what the run assumed, above any finding
    out.append(_key_findings(d))
    out.append("</header>")
    return "\n".join(out)


def _key_findings(d):
    items = []
    summary = d["summary"].value or {}
    counts = counts_of(summary)
    groups = d["groups"]
    per = counts.get("learners_per_group") or counts.get("sequences_per_group") or {}
    if isinstance(per, dict) and per:
        items.append("Learners per group: " + ", ".join(
            f"{_group_label(g, groups)} {_int(n)}" for g, n in per.items()) + ".")
    items += activity_lines(summary, groups)
    items += survival_lines(summary, d["alpha"])
    items += unit_lines(summary)
    pat = d["patterns"].value
    if pat is not None and "pattern" in pat.columns:
        sig = _significant(pat, d["alpha"])
        beyond = ""
        if "evidence" in pat.columns:  # findings that survive the volume adjustment
            sig = pat[pat["evidence"].astype(str).isin(["order", "presence"])]
            beyond = " beyond how active they were"
        if sig is not None:
            if len(sig):
                fav = (sorted(sig["favours"].value_counts().items(),
                              key=lambda kv: (-kv[1], str(kv[0])))
                       if "favours" in sig.columns else [])
                parts = [f"{_int(n)} favour {_group_label(g, groups)}"
                         for g, n in fav if str(g)]
                distinct = ""
                if "redundant_of" in sig.columns:
                    n_distinct = int((sig["redundant_of"].astype(str).str.strip() == "").sum())
                    distinct = f"; {_int(n_distinct)} without near-duplicates"
                items.append(f"{_int(len(sig))} of {_int(len(pat))} patterns differ reliably "
                             f"between groups{beyond} (q ≤ {d['alpha']:g}{distinct})"
                             + (": " + ", ".join(parts) if parts else "") + ".")
                items += _strongest(sig, groups)
            else:
                items.append(f"None of the {_int(len(pat))} patterns differs reliably between "
                             f"groups{beyond} (q ≤ {d['alpha']:g}).")
    items += prediction_glance(d)
    items += _detectors_glance(d)
    if not items:
        return ""
    return ('<div class="keybox"><b>At a glance</b><ul>' + "".join(f"<li>{i}</li>" for i in items)
            + "</ul><p>These are associations in this data set, not causes; see "
            '<a href="#cautions">Cautions</a>.</p></div>')


def _strongest(sig, groups):
    """Per favoured group, the most reliable non-redundant pattern with its supports."""
    if "favours" not in sig.columns:
        return []
    if "redundant_of" in sig.columns:
        sig = sig[sig["redundant_of"].astype(str).str.strip() == ""]
    top, _ = top_patterns(sig, 1.0, len(sig))
    items = []
    for g in groups:
        rows = top[top["favours"].astype(str) == g]
        if rows.empty:
            continue
        r = rows.iloc[0]
        sup = [f"{esc(h)} {_pct(r[f'support_{h}'])}" for h in groups
               if f"support_{h}" in r.index]
        items.append(f"Most reliable pattern more common among {_group_label(g, groups)}: "
                     f"{_chips(row_tokens(r))}"
                     + (f" (in {', '.join(sup)} of sequences)" if sup else "") + ".")
    return items


def _detectors_glance(d):
    """One line: how many detectors, in which direction."""
    det = (d["detectors"].value or {}).get("detectors")
    if not isinstance(det, list):
        return []
    dirs = [str(x.get("direction", "")) for x in det if isinstance(x, dict)]
    return [f"{_plural(len(det), 'detector')} exported for review: "
            f"{_int(dirs.count('encourage'))} encourage, {_int(dirs.count('discourage'))} "
            "discourage."]


def section_overview(d, figs):
    """Rows kept and rejected, learners per group, gains, lengths, pause bins."""
    out = [_h2("overview")]
    inp = d["summary"]
    summary = inp.value or {}
    counts = counts_of(summary)
    if not inp.ok:
        out.append(_missing(inp.note))
    rows = []
    rin, kept, rej = (counts.get(k) for k in ("rows_in", "rows_kept", "rows_rejected"))
    for label, key in [("Event rows read", "rows_in"), ("Rows used", "rows_kept"),
                       ("Rows rejected", "rows_rejected")]:
        v = counts.get(key)
        if v is not None:
            share = f" ({_pct(_as_float(v) / _as_float(rin))})" if key != "rows_in" and _as_float(rin) else ""
            rows.append([esc(label), f'<td class="num">{_int(v)}{share}</td>'])
    for label, key in [("Learners with events", "learners"),
                       ("Learners without an outcome group", "learners_without_group"),
                       ("Sequences analysed", "sequences"), ("Patterns mined", "patterns_mined"),
                       ("Patterns that differ reliably", "patterns_significant")]:
        if counts.get(key) is not None:
            rows.append([esc(label), f'<td class="num">{_int(counts[key])}</td>'])
    if rows:
        out.append(_table(["", "count"], rows, raw_cells=True))
    if None not in (rin, kept, rej) and all(_is_finite(x) for x in (rin, kept, rej)):
        if _as_float(rin) == _as_float(kept) + _as_float(rej):
            out.append("<p>Row accounting reconciles: every input row was either used or "
                       "rejected with a reason.</p>")
        else:
            out.append('<p class="warn">Row accounting does not reconcile: rows read ≠ rows '
                       "used + rows rejected. Check the run's log.</p>")
    out.append(_group_table(counts, d["groups"]))
    out.append(_rejects(d["rejects"], counts))
    encoding = summary.get("encoding")
    unit = encoding.get("unit") if isinstance(encoding, dict) else None
    for key, title, xlabel in [
            ("gain_by_group", "Outcome (normalized gain) by group", "normalized gain"),
            ("sequence_lengths", "Sequence length by group",
             "tokens per sequence" + (f" (one sequence per {unit})" if unit else ""))]:
        stats = _five_numbers(summary.get(key))
        if stats:
            out.append(f"<h3>{esc(title)}</h3>")
            out.append(_plots.svg_boxes(stats, title=title, xlabel=xlabel, fig_id=figs()))
    out.append(_pause_bins(summary))
    return _section("overview", out)


def section_patterns(d, figs, *, examples, max_patterns, max_examples):
    """Top differential patterns with supports, effects, q values and excerpts."""
    out = [_h2("patterns"),
           "<p>A <b>pattern</b> is an ordered run of actions (and pauses) that occurs in a "
           "learner's sequence, not necessarily back to back. <b>Support</b> is the share of a "
           "group's sequences that contain it. <b>q</b> is the p value after correcting for "
           "the many patterns tested; small q (at or below the threshold) means the "
           "difference is unlikely to be chance alone. <b>Risk difference</b> is the gap "
           "between the two supports; <b>odds ratio</b> above 1 means more common in the "
           "first group; <b>Cohen's h</b> and <b>Cliff's delta</b> are standardised effect "
           "sizes (about 0.2 small, 0.5 medium, 0.8 large for h — common practice). "
           "Each finding says what the data support: the <b>order</b> of its items, its "
           "<b>presence</b> at equal activity, or only the groups' <b>activity</b> "
           "(volume).</p>", f"<p>{STABILITY_TEXT}</p>"]
    inp = d["patterns"]
    if not inp.ok:
        return _section("patterns", out + [_missing(inp.note)])
    df = inp.value
    if "pattern" not in df.columns:
        return _section("patterns", out + [_missing("patterns.csv has no 'pattern' column")])
    if df.empty:
        return _section("patterns", out + ['<p class="note">No pattern was mined.</p>'])
    groups = d["groups"]
    sup_cols = [(g, f"support_{g}") for g in groups if f"support_{g}" in df.columns]
    hidden = 0
    if "redundant_of" in df.columns:
        redundant = df["redundant_of"].astype(str).str.strip() != ""
        hidden = int(redundant.sum())
        df = df[~redundant]
    ex_map = {}
    if examples:
        ex_inp = d["examples"]
        if ex_inp.ok and isinstance(ex_inp.value.get("patterns"), dict):
            ex_map = ex_inp.value["patterns"]
    redundant_note = (f" {_plural(hidden, 'pattern')} that nearly duplicate a listed one (same "
                      "learners) left out here; see the <code>redundant_of</code> column of "
                      "patterns.csv." if hidden else "")
    grouped = findings_by_evidence(df, max_patterns)
    if not grouped:  # a table without the evidence column: one list by q value
        top, note = top_patterns(df, d["alpha"], max_patterns)
        out.append(f'<p class="note">{note}{redundant_note}</p>')
        out += _cards(top, sup_cols, groups, d, figs, ex_map, examples, max_examples)
    else:
        out.append(f'<p class="note">Findings are grouped by what the data support; within '
                   f"a group the most reliable come first.{redundant_note}</p>")
    for kind, title, reading, rows, total in grouped:
        out.append(f"<h3>{esc(title)}: {_plural(total, 'pattern')}</h3><p>{reading}</p>")
        if not total:
            continue
        if kind == "volume":
            out.append(_volume_only_table(rows.head(10), groups, total))
            continue
        if total > len(rows):
            out.append(f'<p class="note">The {len(rows)} most reliable are shown; '
                       "patterns.csv lists all.</p>")
        out += _cards(rows, sup_cols, groups, d, figs, ex_map, examples, max_examples)
    if not examples:
        out.append('<p class="note">Example excerpts were switched off for this report.</p>')
    elif not d["examples"].ok:
        out.append(_missing(f"example excerpts: {d['examples'].note}"))
    return _section("patterns", out)


def _cards(rows, sup_cols, groups, d, figs, ex_map, examples, max_examples):
    out = []
    if sup_cols and len(rows):
        out.append(_plots.svg_support_bars(
            [PATTERN_SEPARATOR.join(row_tokens(r)) for _, r in rows.iterrows()],
            {g: rows[c].to_numpy(float) for g, c in sup_cols}, fig_id=figs()))
    for rank, (_, row) in enumerate(rows.iterrows(), start=1):
        out.append(_pattern_card(rank, row, sup_cols, groups, d["alpha"],
                                 row_excerpts(ex_map, row), examples, max_examples))
    return out


def _volume_only_table(rows, groups, total):
    heads = ["pattern"] + [f"share {g}" for g in groups] + ["q (before)", "q (at equal "
                                                            "activity)", "more in"]
    body = [[_chips(row_tokens(r))] + [_pct(r.get(f"support_{g}")) for g in groups]
            + [_fmt_p(r.get("q_value")), _fmt_p(r.get("q_volume")),
               _group_label(r["favours"], groups) if str(r.get("favours") or "") else ""]
            for _, r in rows.iterrows()]
    more = f'<p class="note">{_int(total - len(rows))} more in patterns.csv.</p>' \
        if total > len(rows) else ""
    return _table(heads, body, raw_cells=False,
                  num_cols=tuple(range(1, len(groups) + 3))) + more


def section_tokens(d):
    """Single actions and pause kinds: what each group does more of."""
    out = [_h2("tokens"),
           "<p>Every action and pause kind on its own, whatever the mined pattern lengths: "
           "the share of each group's learners who show it, how often it occurs per 100 "
           "tokens, a rank test on those rates (<b>q (rates)</b>) and the presence test at "
           "equal activity. Differences here are about how often learners do things; "
           "the patterns above add the order they do them in.</p>"]
    inp = d["tokens"]
    if not inp.ok:
        return _section("tokens", out + [_missing(inp.note)])
    out.append(tokens_table(inp.value, d["groups"], d["alpha"]))
    return _section("tokens", out)


def section_transitions(d, figs):
    """Lag-1 transition heatmaps of adjusted residuals, one per group."""
    out = [_h2("transitions"),
           "<p>For each pair of consecutive tokens, the <b>adjusted residual</b> compares how "
           "often the second followed the first with what independence would predict: "
           "blue cells (positive) are followed more often than expected, brown cells "
           "(negative) less often. The residuals pool every transition of a group as if "
           "each were independent, so they <b>describe</b> the tables and are not tests: "
           "very active learners weigh most, and with many transitions tiny differences "
           "look extreme. The small number under each residual is the observed count. "
           "Whether the groups differ is tested at the learner level: each learner's own "
           "share of the transitions out of a token, compared between groups "
           "(<b>q (learners)</b>, every learner counted once).</p>"]
    inp = d["transitions"]
    if not inp.ok:
        return _section("transitions", out + [_missing(inp.note)])
    df = inp.value
    need = [c for c in ("from", "to", "adjusted_residual") if c not in df.columns]
    if need:
        return _section("transitions", out + [_missing(
            "transitions.csv lacks column(s) " + ", ".join(need))])
    if "group" not in df.columns:
        df = df.assign(group="all")
    for g in _ordered(df["group"].unique(), d["groups"]):
        sub = df[df["group"] == g]
        out.append(f"<h3>{_group_label(g, d['groups'])}</h3>")
        out.append(_transition_figure(sub, g, figs))
        out.append(_transition_table(sub))
    return _section("transitions", out)


def section_phases(d, figs):
    """Phase models as state diagrams, state selection and occupancy."""
    out = [_h2("phases"),
           "<p>A hidden Markov model groups moments of work into a few <b>phases</b> (states), "
           "each with the tokens it most often produces. Arrows show how likely the next "
           "step moves to another phase; <b>stays</b> is the expected number of consecutive "
           "steps in a phase. Models were fitted on all learners together (pooled) and per "
           "group; phase names are made from their most frequent tokens, not judgements.</p>"]
    models = d["models"]
    if not models:
        out.append(_missing(d["models_note"]))
    psum = d["phases_summary"].value or {}
    if _is_finite(psum.get("n_states")):
        crit = psum.get("criterion")
        out.append(f"<p>Every model has {_int(psum['n_states'])} phases"
                   + (f" (count chosen by {esc(crit)})" if crit else "") + ".</p>")
    out.append(_phase_warnings(psum))
    order = {"pooled": -1, **{g: i for i, g in enumerate(d["groups"])}}
    models = sorted(models, key=lambda m: (order.get(m["group"], len(order)), m["group"],
                                           m["file"]))
    cells = []
    crowded = any(len(m["states"]) > 4 for m in models)
    min_prob = 0.1 if crowded else 0.05
    if models:
        out.append(f"<p>Arrows with a probability below {min_prob:g} are left out, except "
                   "each phase's most likely move to another phase (so every phase shows "
                   "where work goes next); tokens produced less than 1% of the time in a "
                   "phase are not listed.</p>")
    for m in models:
        states = m["states"]
        rows = [[esc(st["name"]), _fmt(st.get("dwell"), 1),
                 " · ".join(f"<code>{esc(t)}</code>&nbsp;{_pct(p)}"
                            for t, p in st["emissions"][:5])] for st in states]
        cells.append(
            f"<div><h3>{_group_label(m['group'], d['groups'])} "
            f'<span class="note">(<code>{esc(m["file"])}</code>)</span></h3>\n'
            + _plots.svg_state_diagram(states, m["transmat"], min_prob=min_prob,
                                       title=f"Phase model: {m['group']}", fig_id=figs())
            + _table(["phase", "stays (steps)", "most frequent tokens"], rows,
                     raw_cells=False, num_cols=(1,)) + "</div>")
    if cells:
        out.append(f'<div class="{"grid1" if crowded else "grid2"}">' + "\n".join(cells)
                   + "</div>")
    out.append(_state_selection(d["state_selection"], psum.get("n_states")))
    out.append(_occupancy(d["occupancy"], d["groups"], figs))
    if d["graphml"]:
        out.append("<p>Graphs for network tools: " + ", ".join(
            f"<code>phases/{esc(n)}</code>" for n in d["graphml"]) + ".</p>")
    return _section("phases", out)


def _phase_warnings(psum):
    """The phases stage's own warnings (also in summary.json), as a list."""
    items = psum.get("warnings") if isinstance(psum, dict) else None
    msgs = [str(w.get("message", "")) for w in items or [] if isinstance(w, dict)]
    msgs = [m for m in msgs if m]
    if psum.get("n_states_at_top_of_range") is True and not any(
            "largest tried" in m for m in msgs):
        msgs.append("The chosen number of phases is the largest tried; a wider range of "
                    "phase counts might fit better.")
    if not msgs:
        return ""
    return ('<div class="note"><b>Check before reading the phases:</b><ul>'
            + "".join(f"<li>{esc_message(m)}</li>" for m in msgs) + "</ul></div>")


def phase_model(data):
    """States and transition matrix of a phase model JSON object, or None if unusable.

    Reads ``tokens``, ``emission_probabilities`` (states x tokens),
    ``transition_matrix``, ``state_labels`` and ``state_names`` (format version 2;
    version 1 spelled them ``vocab``, ``emissionprob`` and ``transmat``); dwell is
    ``1 / (1 - a_ii)``.

    Examples
    --------
    >>> m = phase_model({"tokens": ["a", "b"],
    ...                  "emission_probabilities": [[0.9, 0.1], [0.2, 0.8]],
    ...                  "transition_matrix": [[0.5, 0.5], [0.25, 0.75]]})
    >>> [(s["name"], s["dwell"], s["emissions"][0]) for s in m["states"]]
    [('S1', 2.0, ('a', 0.9)), ('S2', 4.0, ('b', 0.8))]
    """
    def get(new, old):
        return data.get(new) if new in data else data.get(old)

    try:
        emis = np.asarray(get("emission_probabilities", "emissionprob"), dtype=float)
        vocab = [str(v) for v in get("tokens", "vocab") or []]
    except (TypeError, ValueError):
        return None
    if emis.ndim != 2 or emis.shape[1] != len(vocab) or emis.shape[0] == 0:
        return None
    n = emis.shape[0]
    tm = _matrix(get("transition_matrix", "transmat"), n)
    labels = _str_list(data.get("state_labels"), n) or [f"S{i + 1}" for i in range(n)]
    names = _str_list(data.get("state_names"), n)
    states = []
    for i in range(n):
        order = sorted(range(len(vocab)), key=lambda j: (-emis[i, j], j))[:5]
        stay = float(tm[i, i]) if tm is not None else math.nan
        dwell = 1.0 / (1.0 - stay) if math.isfinite(stay) and stay < 1 else None
        if not names or names[i] == labels[i]:
            name = labels[i]
        elif names[i].startswith(labels[i] + " "):   # version 2 names carry the label
            name = names[i]
        else:
            name = f"{labels[i]} {names[i]}"
        states.append({"name": name, "dwell": dwell,
                       "emissions": [(vocab[j], float(emis[i, j])) for j in order
                                     if math.isfinite(emis[i, j]) and emis[i, j] >= 0.01]})
    return {"states": states, "transmat": tm}


def section_detectors(d, *, examples=True):
    """Exported detectors with direction, delivery, hint text, evidence and an example."""
    out = [_h2("detectors"),
           "<p>Each detector watches a live event stream for one pattern and, when it "
           "fires, can show its hint. <b>Encourage</b> marks orderings more common among "
           "learners who did well; <b>discourage</b> marks orderings more common among those "
           "who did not. Hint texts and priorities are drafts to edit in "
           "<code>detectors.json</code> (priority 1 is delivered first); review them with "
           "educators and pilot them before they reach learners.</p>"
           "<p><b>Delivery by default</b> (<code>seqmine watch</code>): a discourage "
           "detector hints when its pattern occurs; an encourage detector hints when its "
           "pattern has <i>not</i> occurred by its absence point (by then three in four "
           "learners of the favoured group who ever showed it had shown it). At most one "
           "hint per event, none within the cool-down after the last (60 s), and at most "
           "two absence hints per sequence; an absence hint held back is tried again after "
           "the cool-down. Each card shows the supports and rates per group, the q values, "
           "the length of every pause in seconds and one short example.</p>"]
    inp = d["detectors"]
    if not inp.ok:
        return _section("detectors", out + [_missing(inp.note)])
    doc = inp.value
    dets = doc.get("detectors")
    if not isinstance(dets, list):
        return _section("detectors", out + [_missing("detectors.json has no 'detectors' list")])
    if doc.get("notice"):
        out.append(f'<p class="warn">{esc(doc["notice"], max_chars=2000)}</p>')
    matching = doc.get("matching")
    if isinstance(matching, dict):
        parts = []
        gap = matching.get("max_gap")
        if _is_finite(gap) and _as_float(gap) == 0:
            parts.append("the steps of a pattern follow each other directly")
        elif gap is not None:
            parts.append(f"at most {esc(gap)} other tokens between two steps")
        if matching.get("max_window") is not None:
            parts.append(f"the whole pattern within {esc(matching['max_window'])} tokens")
        if matching.get("skip_pauses"):
            parts.append("pause tokens not counted")
        if parts:
            out.append("<p>Matching: " + "; ".join(parts) + ".</p>")
    if not dets:
        return _section("detectors", out + ['<p class="note">No detector was exported.</p>'])
    indexed = [(i, x) for i, x in enumerate(dets) if isinstance(x, dict)]
    directions = [str(x.get("direction", "")).lower() for _, x in indexed]
    off = sum(1 for _, x in indexed if x.get("enabled") is False)
    out.append(f"<p>{_plural(len(indexed), 'detector')}: "
               f"{_int(directions.count('encourage'))} encourage, "
               f"{_int(directions.count('discourage'))} discourage"
               + (f"; {_int(off)} switched off" if off else "") + ".</p>")
    indexed.sort(key=lambda t: (_priority(t[1].get("priority")), t[0]))
    for i, det in indexed:
        out.append(_detector_card(i, det, d["groups"], show_example=examples))
    return _section("detectors", out)


def section_method(d):
    """What was tested, corrections, sample sizes, versions and configuration."""
    summary = d["summary"].value or {}
    out = [_h2("method")]
    items = []

    recorded = isinstance(summary.get("stages"), dict)

    def add(label, key, fmt=esc):
        # with a run record, only the statements of stages that ran (kept in method and
        # at the top level by the record), never a configured value of a stage that did not
        v = ((summary.get("method") or {}).get(key, summary.get(key)) if recorded
             else lookup(summary, key))
        if v is not None and v != "":
            items.append(f"<li><b>{label}:</b> {fmt(v)}</li>")

    add("Groups", "grouping", _describe_grouping)
    add("Minimum support (in at least one group)", "min_support")
    add("What the minimum support counts", "support_unit",
        lambda v: {"learner": "learners (a learner counts once if any of its sequences holds "
                              "the pattern)",
                   "sequence": "sequences"}.get(str(v), esc(v)))
    add("Longest pattern", "max_length")
    add("Largest gap between pattern items (tokens)", "max_gap")
    add("Presence test", "presence_test")
    add("Volume-adjusted test", "volume_test")
    add("Order test", "order_test")
    add("Rate test", "rate_test")
    add("Transition test", "transition_test")
    add("Unit of analysis", "unit_of_analysis",
        lambda v: esc(v) + (" (session-level tests: sessions counted as independent)"
                            if str(v) == "sequence" else " (each learner counted once)"))
    add("Multiple-comparison correction", "correction",
        lambda v: esc(_CORRECTIONS.get(str(v).lower(), v)))
    add("Threshold on q", "alpha")
    if str(lookup(summary, "correction") or "").lower().startswith("westfall"):
        add("Permutations", "n_permutations")
    add("Bootstrap resamples behind stability", "n_bootstrap")
    add("Random half splits behind replication", "n_replication_splits")
    add("Cross-validation folds (early prediction)", "n_splits")
    add("Repetitions of the cross-validation (classifiers using phase models)", "n_repeats",
        lambda v: esc(v) + (f" ({esc(lookup(summary, 'n_repeats_hmm'))})"
                            if lookup(summary, "n_repeats_hmm") is not None else ""))
    items.append(f"<li>{STABILITY_TEXT}</li>")
    items.append("<li><b>Patterns</b> were mined by prefix projection (PrefixSpan) and kept "
                 "when frequent in at least one group. <b>Transitions</b>: lag-1 counts with "
                 "adjusted residuals and Yule's Q. <b>Phases</b>: hidden Markov models with "
                 "categorical emissions fitted by Baum–Welch, decoded with Viterbi. <b>Early "
                 "prediction</b>: learner-level cross-validation, repeated with fresh shuffles, with all "
                 "pattern discovery inside the training folds; the outcome groups are "
                 "decided once from the outcome table and kept in every fold.</li>")
    out.append("<ul>" + "".join(items) + "</ul>")
    counts = counts_of(summary)
    out.append(_group_table(counts, d["groups"], title="Sample sizes"))
    seed = summary.get("seed")
    if seed is not None:
        out.append(f"<p>Random seed: <code>{esc(seed)}</code>. The same files and seed give "
                   "the same results.</p>")
    versions = summary.get("versions")
    if isinstance(versions, dict) and versions:
        out.append(_table(["package", "version"],
                          [[esc(k), esc(v)] for k, v in sorted(versions.items(), key=str)],
                          raw_cells=False))
    config = config_of(summary)
    if config is not None:
        text = json.dumps(config, indent=2, sort_keys=True, ensure_ascii=False, default=str)
        out.append("<details><summary>Effective configuration</summary>"
                   f"<pre>{esc(text, max_chars=200_000)}</pre></details>")
    if not d["summary"].ok:
        out.append(_missing(d["summary"].note))
    return _section("method", out)


def section_cautions(d):
    """Fixed cautions plus the pseudonymisation status."""
    summary = d["summary"].value or {}
    pseudo = summary.get("pseudonymized")
    if pseudo is None:
        pseudo = lookup(summary, "pseudonymize")
    if pseudo:
        privacy_state = ("In this run learner identifiers were replaced by keyed hashes "
                         "(pseudonymised) in every output.")
    else:
        privacy_state = ("In this run learner identifiers were <b>not</b> pseudonymised; "
                         "use <code>--pseudonymize KEY_FILE</code> to replace them by keyed "
                         "hashes in every output, and switch off example excerpts if they "
                         "should not leave the analysis team.")
    items = [
        "<b>Correlational findings.</b> Patterns, transitions and phases describe what "
        "learners in each group did more or less often. They do not show that a way of "
        "working causes a better or worse outcome; other differences between learners may "
        "explain both.",
        "<b>Pilot before use.</b> Detectors are candidates. Review them with educators and "
        "pilot them before they drive hints for real learners; check that hints help and "
        "do not single out groups of learners unfairly.",
        "<b>Sample sizes.</b> With few learners per group, supports and effects are "
        "uncertain; read q values, confidence bands and stability together.",
        "<b>Privacy.</b> Follow local data-protection law and your institution's ethics "
        "review for collecting, analysing and sharing these logs and this report. "
        + privacy_state,
    ]
    return _section("cautions", [_h2("cautions"), '<ul class="cautions">'
                                 + "".join(f"<li>{i}</li>" for i in items) + "</ul>"])


def _priority(value):
    """Sort key of a detector priority: its number, or last when not a finite number."""
    x = _as_float(value, math.inf)
    return x if math.isfinite(x) else math.inf
