"""HTML sections of the report (private; see :mod:`seqmine.report`).

Every value that comes from the data passes through :func:`esc` (``html.escape``
with ``quote=True`` after removing control characters); numbers are formatted
here, never taken as text from the files.
"""

from __future__ import annotations

import json
import math
import re
from html import escape

import numpy as np
import pandas as pd

from . import _plots

__all__ = ["esc", "lookup", "config_of", "counts_of", "phase_model", "top_patterns", "group_names_of", "FigureIds", "PAGE_TITLE", "CSS"]

PAGE_TITLE = "seqmine report: behaviour patterns and outcomes"
_SEP = " > "
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")
_CORRECTIONS = {
    "bh": "Benjamini–Hochberg false discovery rate",
    "fdr_bh": "Benjamini–Hochberg false discovery rate",
    "holm": "Holm step-down family-wise error control",
    "westfall-young": "Westfall–Young permutation (min-P) family-wise error control",
    "westfall_young": "Westfall–Young permutation (min-P) family-wise error control",
}

CSS = """\
:root { --ink:#262626; --muted:#5f5f5f; --line:#dedede; --soft:#f5f5f3; --accent:#3f6e8c;
  --warm:#8c5a2b; }
* { box-sizing: border-box; }
body { margin:0; background:#fbfbfa; color:var(--ink);
  font: 15px/1.55 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "Liberation Sans",
  "DejaVu Sans", Arial, sans-serif; }
main { max-width: 1080px; margin: 0 auto; padding: 24px 28px 8px; }
footer { max-width:1080px; margin:0 auto; padding: 12px 28px 32px; color:var(--muted);
  font-size:13px; }
h1 { font-size: 26px; margin: 8px 0 4px; font-weight: 650; }
h2 { font-size: 20px; margin: 40px 0 8px; padding-top: 12px; border-top: 2px solid var(--line);
  font-weight: 620; }
h3 { font-size: 16px; margin: 18px 0 6px; font-weight: 620; }
p { margin: 6px 0 10px; max-width: 78ch; }
.lead { color: var(--muted); font-size: 16px; }
nav.toc { background: var(--soft); border:1px solid var(--line); border-radius:6px;
  padding:8px 14px; margin:14px 0; }
nav.toc ol { margin:4px 0; padding-left: 20px; columns: 2; }
nav.toc a { color: var(--accent); text-decoration: none; }
.note { color: var(--muted); font-style: italic; }
.warn { border-left: 4px solid var(--warm); background:#fbf4ec; padding:6px 10px; }
.keybox { border:1px solid var(--line); background:#fff; border-radius:6px; padding:8px 14px; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 14px; background:#fff; }
th, td { border-bottom: 1px solid var(--line); padding: 4px 10px; text-align: left;
  vertical-align: top; }
th { background: var(--soft); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
.grid2 { display:grid; grid-template-columns: repeat(auto-fit, minmax(440px, 1fr));
  gap: 4px 24px; align-items: start; }
.grid2 table { width: 100%; font-size: 13px; }
.grid2 td:first-child { width: 34%; overflow-wrap: anywhere; }
.fig { max-width: 100%; height: auto; display: block; margin: 6px 0 12px; }
.tok { display:inline-block; border:1px solid #c9c9c9; background:#fff; border-radius:4px;
  padding:0 6px; margin:1px 0; font: 13px/1.6 ui-monospace, "DejaVu Sans Mono",
  "Liberation Mono", monospace; overflow-wrap:anywhere; }
.tok.pause { border-style: dashed; color: var(--muted); background: var(--soft); }
.arrow { color: var(--muted); padding: 0 4px; }
article.card { background:#fff; border:1px solid var(--line); border-radius:6px;
  padding: 10px 16px 12px; margin: 14px 0; }
article.card h3 { margin-top: 4px; }
.rank { color: var(--muted); font-weight: 500; margin-right: 6px; }
.bars { display:grid; grid-template-columns: minmax(90px, max-content) 1fr 4.5em; gap:3px 10px;
  align-items:center; max-width: 620px; margin: 6px 0; font-size: 14px; }
.bar { background: var(--soft); height: 12px; border-radius: 2px; overflow: hidden; }
.bar span { display:block; height:100%; }
.stats { display:flex; flex-wrap:wrap; gap: 4px 18px; margin: 6px 0; font-size:14px; }
.stats span b { font-weight: 600; }
.badge { display:inline-block; border-radius: 10px; padding: 0 9px; font-size: 13px;
  font-weight: 600; border:1px solid; }
.badge.enc { color:#2f5f86; border-color:#2f5f86; background:#eef3f8; }
.badge.dis { color:#8c5a2b; border-color:#8c5a2b; background:#f9f1e8; }
.badge.none { color:var(--muted); border-color:#bdbdbd; background:var(--soft); }
.excerpt { border-top: 1px dashed var(--line); padding-top: 6px; margin-top: 8px; }
.excerpt .who { font-size: 13px; color: var(--muted); }
.flow { display:flex; flex-wrap: wrap; gap: 4px 2px; align-items: flex-start; margin: 4px 0; }
.ev { display:flex; flex-direction: column; align-items:center; }
.ev small { color: var(--muted); font-size: 11px; }
.ev.hit .tok { background:#dfe9f2; border:2px solid #2f5f86; font-weight: 700; }
.gap { color: var(--muted); font-size: 12px; padding: 2px 3px; }
blockquote.hint { margin: 6px 0; padding: 6px 12px; border-left: 4px solid var(--accent);
  background: var(--soft); max-width: 78ch; }
details { margin: 8px 0; }
pre { background: var(--soft); border:1px solid var(--line); padding: 8px 10px;
  overflow-x: auto; font-size: 12.5px; max-height: 420px; }
.swatch { display:inline-block; width: 11px; height: 11px; border-radius: 2px;
  margin-right: 6px; vertical-align: -1px; }
ul.cautions li { margin-bottom: 6px; max-width: 78ch; }
@media print { h2 { break-before: auto; } article.card { break-inside: avoid; } }
"""


def esc(value, max_chars=400):
    """HTML-escaped text of any value, control characters removed, length bounded.

    Examples
    --------
    >>> esc('<script>alert("x")</script>')
    '&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;'
    """
    s = _CONTROL.sub("\ufffd", str(value))
    if len(s) > max_chars:
        s = s[: max_chars - 1] + "…"
    return escape(s, quote=True)


#: Sections of the configuration searched (in order) by :func:`lookup`.
CONFIG_SECTIONS = ("contrast", "mine", "validate", "phases", "encode", "grouping", "privacy",
                   "report")


def lookup(summary, key):
    """Value of ``key`` in the summary: ``method``, the top level, then the configuration.

    The configuration is searched at its top level, then in the sections named in
    :data:`CONFIG_SECTIONS`, in that order; ``None`` when absent.

    Examples
    --------
    >>> lookup({"config": {"contrast": {"alpha": 0.1}}}, "alpha")
    0.1
    >>> lookup({"method": {"alpha": 0.01}, "config": {"alpha": 0.1}}, "alpha")
    0.01
    """
    config = config_of(summary)
    places = [summary.get("method"), summary, config]
    if isinstance(config, dict):
        places += [config.get(name) for name in CONFIG_SECTIONS]
    for place in places:
        if isinstance(place, dict) and key in place:
            return place[key]
    return None


_COUNT_KEYS = ("rows_in", "rows_kept", "rows_rejected", "learners", "learners_per_group",
               "learners_without_group", "sequences", "sequences_per_group",
               "patterns_mined", "patterns_significant", "rejects_by_reason")


def config_of(summary):
    """The effective configuration of a summary (``configuration`` or ``config``)."""
    for key in ("configuration", "config"):
        if isinstance(summary.get(key), dict):
            return summary[key]
    return None


def counts_of(summary):
    """Counts of a summary: the ``counts`` object, or the same keys at the top level."""
    flat = {k: summary[k] for k in _COUNT_KEYS if k in summary}
    nested = summary.get("counts")
    return {**flat, **(nested if isinstance(nested, dict) else {})}


def group_names_of(summary):
    """Group names listed in a summary (``groups`` or ``group_names``), else []."""
    for key in ("groups", "group_names"):
        v = summary.get(key)
        if isinstance(v, list) and v:
            return [str(g) for g in v]
    return []


class FigureIds:
    """Deterministic unique ids for the figures of one page."""

    def __init__(self):
        self.n = 0

    def __call__(self):
        self.n += 1
        return f"fig{self.n}"


# --------------------------------------------------------------------------- sections

_SECTIONS = [("overview", "Data overview"), ("patterns", "Patterns that differ between groups"),
             ("transitions", "Which action follows which"), ("phases", "Phases of work"),
             ("early-prediction", "How early can outcomes be recognised?"),
             ("detectors", "Detectors for hints"), ("method", "Method"),
             ("cautions", "Cautions")]


def section_intro(d):
    """Title, how to read, contents and the key numbers."""
    toc = "".join(f'<li><a href="#{sid}">{title}</a></li>' for sid, title in _SECTIONS)
    out = ['<header id="top">', "<h1>Behaviour patterns and outcomes</h1>",
           '<p class="lead">Which ordered ways of working were more common among learners '
           "in one outcome group than in another, how they unfold over time, and how early a "
           "struggling learner can be recognised. Every number here is read from the files "
           "in this folder.</p>", f'<nav class="toc"><b>Contents</b><ol>{toc}</ol></nav>']
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
    pat = d["patterns"].value
    if pat is not None and "pattern" in pat.columns:
        sig = _significant(pat, d["alpha"])
        if sig is not None:
            if len(sig):
                fav = (sorted(sig["favours"].value_counts().items(),
                              key=lambda kv: (-kv[1], str(kv[0])))
                       if "favours" in sig.columns else [])
                parts = [f"{_int(n)} favour {_group_label(g, groups)}"
                         for g, n in fav if str(g)]
                items.append(f"{_int(len(sig))} of {_int(len(pat))} patterns differ reliably "
                             f"between groups (q ≤ {d['alpha']:g})"
                             + (": " + ", ".join(parts) if parts else "") + ".")
            else:
                items.append(f"None of the {_int(len(pat))} patterns differs reliably between "
                             f"groups (q ≤ {d['alpha']:g}).")
    det = (d["detectors"].value or {}).get("detectors")
    if isinstance(det, list):
        items.append(f"{_int(len(det))} detectors exported for review.")
    if not items:
        return ""
    return ('<div class="keybox"><b>At a glance</b><ul>' + "".join(f"<li>{i}</li>" for i in items)
            + "</ul><p>These are associations in this data set, not causes; see "
            '<a href="#cautions">Cautions</a>.</p></div>')


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
            share = f" ({_pct(_num(v) / _num(rin))})" if key != "rows_in" and _num(rin) else ""
            rows.append([esc(label), f'<td class="num">{_int(v)}{share}</td>'])
    for label, key in [("Learners with events", "learners"),
                       ("Learners without an outcome group", "learners_without_group"),
                       ("Sequences analysed", "sequences"), ("Patterns mined", "patterns_mined"),
                       ("Patterns that differ reliably", "patterns_significant")]:
        if counts.get(key) is not None:
            rows.append([esc(label), f'<td class="num">{_int(counts[key])}</td>'])
    if rows:
        out.append(_table(["", "count"], rows, raw_cells=True))
    if None not in (rin, kept, rej) and all(_is_num(x) for x in (rin, kept, rej)):
        if _num(rin) == _num(kept) + _num(rej):
            out.append("<p>Row accounting reconciles: every input row was either used or "
                       "rejected with a reason.</p>")
        else:
            out.append('<p class="warn">Row accounting does not reconcile: rows read ≠ rows '
                       "used + rows rejected. Check the run's log.</p>")
    out.append(_group_table(counts, d["groups"]))
    out.append(_rejects(d["rejects"], counts))
    unit = (summary.get("encoding") or {}).get("unit")
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
           "<b>Stability</b> is how often the pattern came out again on resampled data "
           "(1 = always).</p>"]
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
    top, note = top_patterns(df, d["alpha"], max_patterns)
    if hidden:
        note += (f" {_plural(hidden, 'pattern')} that nearly duplicate a listed one (same "
                 "learners) left out here; see the redundant_of column of patterns.csv.")
    out.append(f'<p class="note">{note}</p>')
    if sup_cols and len(top):
        out.append(_plots.svg_support_bars(
            [_pattern_label(p) for p in top["pattern"]],
            {g: top[c].to_numpy(float) for g, c in sup_cols}, fig_id=figs()))
    ex_map = {}
    if examples:
        ex_inp = d["examples"]
        if ex_inp.ok and isinstance(ex_inp.value.get("patterns"), dict):
            ex_map = ex_inp.value["patterns"]
    for rank, (_, row) in enumerate(top.iterrows(), start=1):
        out.append(_pattern_card(rank, row, sup_cols, groups, d["alpha"],
                                 ex_map.get(str(row["pattern"])), examples, max_examples))
    if not examples:
        out.append('<p class="note">Example excerpts were switched off for this report.</p>')
    elif not d["examples"].ok:
        out.append(_missing(f"example excerpts: {d['examples'].note}"))
    return _section("patterns", out)


def section_transitions(d, figs):
    """Lag-1 transition heatmaps of adjusted residuals, one per group."""
    out = [_h2("transitions"),
           "<p>For each pair of consecutive tokens, the <b>adjusted residual</b> compares how "
           "often the second followed the first with what independence would predict: "
           "blue cells (positive) are followed more often than expected, brown cells "
           "(negative) less often. Values beyond ±1.96 are notable at about the 5% level "
           "for one cell (common practice; many cells are shown, so expect some by chance). "
           "The small number under each residual is the observed count.</p>"]
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
    if _is_num(psum.get("n_states")):
        crit = psum.get("criterion")
        out.append(f"<p>Every model has {_int(psum['n_states'])} phases"
                   + (f" (count chosen by {esc(crit)})" if crit else "") + ".</p>")
    order = {"pooled": -1, **{g: i for i, g in enumerate(d["groups"])}}
    models = sorted(models, key=lambda m: (order.get(m["group"], len(order)), m["group"],
                                           m["file"]))
    cells = []
    for m in models:
        states = m["states"]
        rows = [[esc(st["name"]), _fmt(st.get("dwell"), 1),
                 " · ".join(f"<code>{esc(t)}</code>&nbsp;{_pct(p)}"
                            for t, p in st["emissions"][:5])] for st in states]
        cells.append(
            f"<div><h3>{_group_label(m['group'], d['groups'])} "
            f'<span class="note">({esc(m["file"])})</span></h3>\n'
            + _plots.svg_state_diagram(states, m["transmat"],
                                       title=f"Phase model: {m['group']}", fig_id=figs())
            + _table(["phase", "stays (steps)", "most frequent tokens"], rows,
                     raw_cells=False, num_cols=(1,)) + "</div>")
    if cells:
        out.append('<div class="grid2">' + "\n".join(cells) + "</div>")
    out.append(_state_selection(d["state_selection"], psum.get("n_states")))
    out.append(_occupancy(d["occupancy"], d["groups"], figs))
    if d["graphml"]:
        out.append("<p>Graphs for network tools: " + ", ".join(
            f"<code>phases/{esc(n)}</code>" for n in d["graphml"]) + ".</p>")
    return _section("phases", out)


def phase_model(data):
    """States and transition matrix of a phase model JSON object, or None if unusable.

    Reads ``vocab``, ``emissionprob`` (states x vocab), ``transmat``, ``state_labels``
    and ``state_names``; dwell is ``1 / (1 - a_ii)``.

    Examples
    --------
    >>> m = phase_model({"vocab": ["a", "b"], "emissionprob": [[0.9, 0.1], [0.2, 0.8]],
    ...                  "transmat": [[0.5, 0.5], [0.25, 0.75]]})
    >>> [(s["name"], s["dwell"], s["emissions"][0]) for s in m["states"]]
    [('S1', 2.0, ('a', 0.9)), ('S2', 4.0, ('b', 0.8))]
    """
    try:
        emis = np.asarray(data.get("emissionprob"), dtype=float)
        vocab = [str(v) for v in data.get("vocab") or []]
    except (TypeError, ValueError):
        return None
    if emis.ndim != 2 or emis.shape[1] != len(vocab) or emis.shape[0] == 0:
        return None
    n = emis.shape[0]
    tm = _matrix(data.get("transmat"), n)
    labels = _str_list(data.get("state_labels"), n) or [f"S{i + 1}" for i in range(n)]
    names = _str_list(data.get("state_names"), n)
    states = []
    for i in range(n):
        order = sorted(range(len(vocab)), key=lambda j: (-emis[i, j], j))[:5]
        stay = float(tm[i, i]) if tm is not None else math.nan
        dwell = 1.0 / (1.0 - stay) if math.isfinite(stay) and stay < 1 else None
        name = labels[i] if not names or names[i] == labels[i] else f"{labels[i]} {names[i]}"
        states.append({"name": name, "dwell": dwell,
                       "emissions": [(vocab[j], float(emis[i, j])) for j in order
                                     if math.isfinite(emis[i, j])]})
    return {"states": states, "transmat": tm}


def section_prediction(d, figs):
    """Early prediction curves against the majority baseline."""
    out = [_h2("early-prediction"),
           "<p>Classifiers were trained on some learners and tested on others, seeing only "
           "the first part of each test sequence. <b>Balanced accuracy</b> averages the share "
           "recognised in each group, so 0.5 is chance whatever the group sizes. The dashed "
           "line is the <b>majority baseline</b>: always guessing the larger group. Shaded "
           "bands are bootstrap confidence intervals.</p>"]
    inp = d["early_prediction"]
    if not inp.ok:
        return _section("early-prediction", out + [_missing(inp.note)])
    df = inp.value
    metrics = [m for m in ("balanced_accuracy", "accuracy") if m in df.columns]
    if "fraction" not in df.columns or not metrics:
        return _section("early-prediction", out + [_missing(
            "early_prediction.csv needs 'fraction' and 'accuracy' or 'balanced_accuracy'")])
    if "classifier" not in df.columns:
        df = df.assign(classifier="classifier")
    df = df.assign(classifier=df["classifier"].astype(str))
    names = list(dict.fromkeys(df["classifier"]))
    rank = {n: i for i, n in enumerate(names)}
    df = (df.assign(_r=df["classifier"].map(rank))
          .sort_values(["_r", "fraction"], kind="mergesort").drop(columns="_r"))
    base_col = next((c for c in ("baseline_accuracy", "baseline") if c in df.columns), None)
    shown = [n for n in names if n != "majority"] or names
    charts = []
    for metric in metrics:
        curves = {}
        for name in shown:
            sub = df[df["classifier"] == name]
            lo, hi = _bounds(sub, metric)
            curves[name] = {"fraction": sub["fraction"], "value": sub[metric],
                            "low": lo, "high": hi}
        baseline = chance = None
        if metric == "accuracy":
            if base_col is not None:
                b = df.groupby("fraction", sort=True)[base_col].mean()
                baseline = {"fraction": b.index, "value": b.to_numpy(),
                            "label": "majority baseline"}
            elif "majority" in names and len(shown) < len(names):
                b = df[df["classifier"] == "majority"]
                baseline = {"fraction": b["fraction"], "value": b["accuracy"],
                            "label": "majority baseline"}
        if metric == "balanced_accuracy":
            chance = 0.5
        label = metric.replace("_", " ")
        charts.append("<div>" + _plots.svg_prediction_curves(
            curves, fig_id=figs(), baseline=baseline, chance=chance, ylabel=label,
            title=f"{label.capitalize()} by share of sequence observed") + "</div>")
    out.append('<div class="grid2">' + "".join(charts) + "</div>")
    out.append(_earliest(df, shown))
    recall = [c for c in df.columns if c.startswith("recall_") and not c.endswith(("_low",
                                                                                    "_high"))]
    cols = [c for c in ("n_learners", "accuracy", "balanced_accuracy", *recall, "roc_auc",
                        base_col) if c is not None and c in df.columns]
    rows = []
    for _, r in df.iterrows():
        row = [esc(r["classifier"]), _pct(r["fraction"])]
        for c in cols:
            row.append(_int(r[c]) if c == "n_learners" else _fmt(r[c], 2))
        if "beats_baseline" in df.columns:
            row.append("✓" if _true(r["beats_baseline"]) else "")
        rows.append(row)
    heads = (["classifier", "observed"] + [_metric_head(c) for c in cols]
             + (["beats baseline"] if "beats_baseline" in df.columns else []))
    out.append("<details><summary>All values</summary>"
               + _table(heads, rows, raw_cells=False, num_cols=tuple(range(1, 2 + len(cols))))
               + "</details>")
    return _section("early-prediction", out)


def _bounds(sub, metric):
    for lo, hi in ((f"{metric}_low", f"{metric}_high"),
                   (f"{metric}_ci_low", f"{metric}_ci_high")):
        if lo in sub.columns and hi in sub.columns and sub[[lo, hi]].notna().all().all():
            return sub[lo], sub[hi]
    return None, None


def _earliest(df, names):
    """Earliest fraction at which each classifier is reliably better than the baseline."""
    if "beats_baseline" in df.columns:
        rule = ("the classifier was right for significantly more held-out learners than "
                "the majority baseline (one-sided test)")
        hit = df["beats_baseline"].map(_true)
    elif "balanced_accuracy" in df.columns and _bounds(df, "balanced_accuracy")[0] is not None:
        rule = "the lower confidence bound of balanced accuracy is above chance"
        hit = _bounds(df, "balanced_accuracy")[0] > 0.5
    else:
        return ""
    parts = []
    for name in names:
        sel = (df["classifier"] == name) & hit
        if sel.any():
            parts.append(f"<li>{esc(name)}: from {_pct(df.loc[sel, 'fraction'].min())} of "
                         "the sequence.</li>")
        else:
            parts.append(f"<li>{esc(name)}: not at any observed share.</li>")
    return (f"<p>Earliest reliable recognition (first share of the sequence at which {rule}):"
            "</p><ul>" + "".join(parts) + "</ul>")


def section_detectors(d):
    """Exported detectors with direction, hint text and evidence."""
    out = [_h2("detectors"),
           "<p>Each detector watches a live event stream for one pattern and, when it "
           "fires, can show its hint. <b>Encourage</b> marks orderings more common among "
           "learners who did well; <b>discourage</b> marks orderings more common among those "
           "who did not. Hint texts and priorities are drafts to edit in "
           "<code>detectors.json</code> (priority 1 is delivered first); review them with "
           "educators and pilot them before they reach learners.</p>"]
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
        if matching.get("max_gap") is not None:
            parts.append(f"at most {esc(matching['max_gap'])} other tokens between two steps")
        if matching.get("max_window") is not None:
            parts.append(f"the whole pattern within {esc(matching['max_window'])} tokens")
        if matching.get("skip_pauses"):
            parts.append("pause tokens not counted")
        if parts:
            out.append("<p>Matching: " + "; ".join(parts) + ".</p>")
    if not dets:
        return _section("detectors", out + ['<p class="note">No detector was exported.</p>'])
    indexed = [(i, x) for i, x in enumerate(dets) if isinstance(x, dict)]
    indexed.sort(key=lambda t: (_num(t[1].get("priority"), math.inf), t[0]))
    for i, det in indexed:
        out.append(_detector_card(i, det, d["groups"]))
    return _section("detectors", out)


def section_method(d):
    """What was tested, corrections, sample sizes, versions and configuration."""
    summary = d["summary"].value or {}
    out = [_h2("method")]
    items = []

    def add(label, key, fmt=esc):
        v = lookup(summary, key)
        if v is not None and v != "":
            items.append(f"<li><b>{label}:</b> {fmt(v)}</li>")

    add("Groups", "grouping", _describe_grouping)
    add("Minimum support (in at least one group)", "min_support")
    add("Longest pattern", "max_length")
    add("Largest gap between pattern items (tokens)", "max_gap")
    add("Presence test", "presence_test")
    add("Rate test", "rate_test")
    add("Multiple-comparison correction", "correction",
        lambda v: esc(_CORRECTIONS.get(str(v).lower(), v)))
    add("Threshold on q", "alpha")
    if str(lookup(summary, "correction") or "").lower().startswith("westfall"):
        add("Permutations", "n_permutations")
    add("Bootstrap resamples behind stability", "stability_resamples")
    add("Cross-validation folds (early prediction)", "folds")
    items.append("<li><b>Patterns</b> were mined by prefix projection (PrefixSpan) and kept "
                 "when frequent in at least one group. <b>Transitions</b>: lag-1 counts with "
                 "adjusted residuals and Yule's Q. <b>Phases</b>: hidden Markov models with "
                 "categorical emissions fitted by Baum–Welch, decoded with Viterbi. <b>Early "
                 "prediction</b>: learner-level cross-validation with all pattern discovery "
                 "inside the training folds.</li>")
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


# --------------------------------------------------------------------------- pieces


def _pattern_card(rank, row, sup_cols, groups, alpha, excerpts, examples, max_examples):
    tokens = _split(row["pattern"])
    out = ['<article class="card">',
           f'<h3><span class="rank">{rank}.</span>{_chips(tokens)}</h3>']
    fav = str(row.get("favours", "") or "")
    q = _num(row.get("q_value"))
    if fav:
        out.append(f"<p>More common among {_group_label(fav, groups)} learners.</p>")
    elif math.isfinite(q) and q > alpha:
        out.append('<p class="note">No reliable difference between groups.</p>')
    if sup_cols:
        out.append('<div class="bars">')
        for g, c in sup_cols:
            v = _num(row[c])
            width = f"{100 * min(max(v, 0.0), 1.0):.1f}" if math.isfinite(v) else "0"
            color = _plots.PALETTE[groups.index(g) % len(_plots.PALETTE)]
            out.append(f"<span>{esc(g)}</span><div class=\"bar\"><span style=\"width:{width}%;"
                       f"background:{color}\"></span></div><span>{_pct(v)}</span>")
        out.append("</div>")
    stats = []
    for label, col, digits in [("q", "q_value", None), ("p", "p_value", None),
                               ("risk difference", "risk_difference", 2),
                               ("odds ratio", "odds_ratio", 2), ("Cohen's h", "cohens_h", 2),
                               ("Cliff's delta", "cliffs_delta", 2),
                               ("Cramér's V", "cramers_v", 2), ("q (rates)", "q_rate", None),
                               ("stability", "stability", 2), ("length", "length", 0)]:
        if col in row.index:
            val = _fmt_p(row[col]) if digits is None else _fmt(row[col], digits)
            stats.append(f"<span>{label} <b>{val}</b></span>")
    if stats:
        out.append('<div class="stats">' + "".join(stats) + "</div>")
    if examples and isinstance(excerpts, list):
        for ex in excerpts[:max_examples]:
            if isinstance(ex, dict):
                out.append(_excerpt(ex, groups))
    out.append("</article>")
    return "\n".join(out)


def _excerpt(ex, groups):
    who = f"learner {esc(ex.get('learner', '?'))}"
    if ex.get("group"):
        who += f" · {_group_label(ex['group'], groups)}"
    events = [e for e in (ex.get("events") or []) if isinstance(e, dict)]
    t0 = next((_num(e.get("time")) for e in events if math.isfinite(_num(e.get("time")))), None)
    cells = []
    for e in events:
        if "elided" in e:
            cells.append(f'<span class="gap">… {_plural(_num(e["elided"], 0), "token")} '
                         "…</span>")
            continue
        tok = str(e.get("token", e.get("action", "?")))
        hit = e.get("matched") is True
        t = _num(e.get("time"))
        when = _clock(t - t0) if t0 is not None and math.isfinite(t) else ""
        gap = _num(e.get("pause"))
        if tok.startswith("pause:") and math.isfinite(gap):
            when = _duration(gap)
        mark = " ✓" if hit else ""
        cells.append(f'<span class="ev{" hit" if hit else ""}">{_chip(tok)}'
                     f"<small>{when}{mark}</small></span>")
        if math.isfinite(gap) and not tok.startswith("pause:"):
            cells.append(f'<span class="gap">··· {_duration(gap)} ···</span>')
    return (f'<div class="excerpt"><div class="who">Example: {who} (matched tokens in bold '
            "with ✓; time since the first shown event; pauses with their length)</div>"
            f'<div class="flow">{"".join(cells)}</div></div>')


def _detector_card(i, det, groups):
    tokens = det.get("tokens", det.get("pattern"))
    if isinstance(tokens, str):
        tokens = _split(tokens)
    elif isinstance(tokens, list):
        tokens = [str(t) for t in tokens]
    else:
        tokens = []
    direction = str(det.get("direction", "")).lower()
    badge = {"encourage": '<span class="badge enc">▲ encourage</span>',
             "discourage": '<span class="badge dis">▼ discourage</span>'}.get(
        direction, f'<span class="badge none">{esc(direction or "no direction")}</span>')
    if det.get("enabled") is False:
        badge += ' <span class="badge none">switched off</span>'
    name = det.get("id", det.get("name", f"detector {i + 1}"))
    out = ['<article class="card">', f"<h3>{badge} <code>{esc(name)}</code></h3>",
           f"<p>{_chips(tokens)}</p>"]
    hint = det.get("hint")
    if hint:
        out.append(f'<blockquote class="hint">{esc(hint, max_chars=2000)}</blockquote>')
    else:
        out.append('<p class="note">No hint text yet.</p>')
    facts = []
    if det.get("priority") is not None:
        facts.append(f"<span>priority <b>{esc(det['priority'])}</b></span>")
    if det.get("favours"):
        facts.append(f"<span>more common among {_group_label(det['favours'], groups)}</span>")
    absence = det.get("absence")
    if isinstance(absence, dict):
        when = []
        if _is_num(absence.get("after_events")):
            when.append(f"{_int(absence['after_events'])} events")
        if _is_num(absence.get("after_seconds")):
            when.append(_duration(absence["after_seconds"]))
        if when:
            facts.append("<span>also fires when the pattern has not occurred after "
                         + " or ".join(when) + "</span>")
    for key in ("max_gap", "max_window"):
        if det.get(key) is not None:
            facts.append(f"<span>{key.replace('_', ' ')} <b>{esc(det[key])}</b></span>")
    if facts:
        out.append('<div class="stats">' + "".join(facts) + "</div>")
    if det.get("notes"):
        out.append(f"<p>Notes: {esc(det['notes'], max_chars=2000)}</p>")
    ev = det.get("evidence")
    if isinstance(ev, dict) and ev:
        rows = [[esc(label), _evidence_value(key, v)] for label, key, v in _flatten(ev)]
        out.append(_table(["evidence", "value"], rows, raw_cells=False, num_cols=(1,)))
    out.append("</article>")
    return "\n".join(out)


def _flatten(obj, prefix=(), depth=0):
    """(label, last key, value) for every leaf of a nested evidence object."""
    out = []
    for k, v in obj.items():
        path = (*prefix, str(k))
        if isinstance(v, dict) and depth < 2:
            out += _flatten(v, path, depth + 1)
        else:
            label = path[0].replace("_", " ") + (f" ({', '.join(path[1:])})" if len(path) > 1
                                                 else "")
            out.append((label, "/".join(path), v))
    return out


def _evidence_value(key, v):
    if isinstance(v, bool) or not _is_num(v):
        if isinstance(v, float) and math.isnan(v) or v is None:
            return "–"
        return esc(v if not isinstance(v, (dict, list)) else json.dumps(v, sort_keys=True))
    head = key.split("/")[0]
    if "p_value" in key or "q_value" in key:
        return _fmt_p(v)
    if head.startswith(("support", "recall")) or key.startswith("support_"):
        return _pct(v)
    if head == "n":
        return _int(v)
    return _fmt(v, 3)


def _transition_figure(sub, g, figs, max_tokens=16):
    sub = sub[sub["from"].astype(bool) | sub["to"].astype(bool)]
    if sub.empty:
        return '<p class="note">No transitions for this group.</p>'
    if "count" in sub.columns:
        weight = (sub.groupby("from")["count"].sum().add(sub.groupby("to")["count"].sum(),
                                                         fill_value=0))
    else:
        weight = (sub.assign(a=sub["adjusted_residual"].abs()).groupby("from")["a"].sum()
                  .add(sub.assign(a=sub["adjusted_residual"].abs()).groupby("to")["a"].sum(),
                       fill_value=0))
    ranked = sorted(weight.items(), key=lambda kv: (-kv[1], str(kv[0])))
    keep = sorted(str(k) for k, _ in ranked[:max_tokens])
    note = ""
    if len(ranked) > max_tokens:
        note = (f'<p class="note">Showing the {max_tokens} most frequent of {len(ranked)} '
                "tokens; the full table is in transitions.csv.</p>")
    idx = {t: i for i, t in enumerate(keep)}
    m = np.full((len(keep), len(keep)), np.nan)
    c = np.full_like(m, np.nan)
    for _, r in sub.iterrows():
        a, b = str(r["from"]), str(r["to"])
        if a in idx and b in idx:
            m[idx[a], idx[b]] = _num(r["adjusted_residual"])
            if "count" in sub.columns:
                c[idx[a], idx[b]] = _num(r["count"])
    svg = _plots.svg_residual_heatmap(m, keep, keep, title=f"Adjusted residuals: {g}",
                                      fig_id=figs(),
                                      counts=c if "count" in sub.columns else None)
    return svg + note


def _transition_table(sub, n=5):
    sub = sub[np.isfinite(sub["adjusted_residual"])]
    if sub.empty:
        return ""
    key = sub["adjusted_residual"]
    order = sub.assign(_k=key, _f=sub["from"], _t=sub["to"])
    hi = order.sort_values(["_k", "_f", "_t"], ascending=[False, True, True],
                           kind="mergesort").head(n)
    lo = order.sort_values(["_k", "_f", "_t"], ascending=[True, True, True],
                           kind="mergesort").head(n)
    lo = lo[lo["_k"] < 0]
    hi = hi[hi["_k"] > 0]
    cols = [c for c in ("count", "probability", "expected", "adjusted_residual", "yules_q",
                        "q_difference") if c in sub.columns]
    rows = []
    for label, part in (("more often than expected", hi), ("less often than expected", lo)):
        for _, r in part.iterrows():
            rows.append([esc(label), f"{_chip(r['from'])}<span class=\"arrow\">→</span>"
                         f"{_chip(r['to'])}"] + [_transition_cell(c, r[c]) for c in cols])
    if not rows:
        return ""
    heads = ["", "transition"] + [{"probability": "share of next steps",
                                   "q_difference": "q (groups differ)",
                                   "yules_q": "Yule's Q"}.get(c, c.replace("_", " "))
                                  for c in cols]
    return _table(heads, rows, raw_cells=False, num_cols=tuple(range(2, len(heads))))


def _transition_cell(col, value):
    if col == "count":
        return _fmt(value, 0)
    if col == "probability":
        return _pct(value)
    if col == "q_difference":
        return _fmt_p(value)
    return _fmt(value, 2)


def _state_selection(inp, used=None):
    head = "<h3>Choosing the number of phases</h3>"
    if not inp.ok:
        return head + _missing(inp.note)
    df = inp.value
    cols = [c for c in ("model", "group", "n_states", "bic", "heldout_loglik") if c in df.columns]
    marks = [c for c in ("best_bic", "best_heldout", "chosen") if c in df.columns]
    rows = []
    for _, r in df.iterrows():
        row = []
        for c in cols:
            if c in ("model", "group"):
                row.append(esc(r[c]))
            else:
                row.append(_fmt(r[c], 0 if c == "n_states" else 1))
        notes = [{"best_bic": "lowest BIC", "best_heldout": "best held-out",
                  "chosen": "chosen"}[c] for c in marks if _true(r[c])]
        if _is_num(used) and _num(r.get("n_states")) == _num(used):
            notes.append("used")
        row.append(esc(", ".join(dict.fromkeys(notes))))
        rows.append(row)
    heads = [{"n_states": "phases", "heldout_loglik": "held-out log-likelihood",
              "bic": "BIC"}.get(c, c) for c in cols] + [""]
    nums = tuple(i for i, c in enumerate(cols) if c in ("n_states", "bic", "heldout_loglik"))
    return (head + "<p>Each number of phases was fitted and scored: lower BIC and higher "
            "held-out log-likelihood are better.</p>"
            + _table(heads, rows, raw_cells=False, num_cols=nums))


def _occupancy(inp, groups, figs):
    head = ("<h3>Time spent in each phase, by group</h3><p>Each learner's sequence was "
            "decoded with the pooled model; bars show the mean share of steps spent in each "
            "phase. Cliff's delta and q come from a Mann–Whitney U test per phase.</p>")
    if not inp.ok:
        return head + _missing(inp.note)
    df = inp.value
    need = [c for c in ("measure", "state", "group_a", "group_b", "mean_a", "mean_b")
            if c not in df.columns]
    if need:
        return head + _missing(f"{inp.name} lacks column(s) " + ", ".join(need))
    occ = df[df["measure"] == "occupancy"]
    if occ.empty:
        return head + _missing(f"{inp.name} has no 'occupancy' rows")
    pairs = list(dict.fromkeys(zip(occ["group_a"], occ["group_b"])))
    ga, gb = pairs[0]
    sub = occ[(occ["group_a"] == ga) & (occ["group_b"] == gb)]
    label = {}
    for _, r in sub.iterrows():
        name = str(r.get("state_name", "") or "")
        label[str(r["state"])] = f"{r['state']} {name}".strip() if name != str(r["state"]) \
            else str(r["state"])
    states = list(dict.fromkeys(str(x) for x in sub["state"]))
    first = {st: sub[sub["state"].astype(str) == st].iloc[0] for st in states}
    means = {str(ga): [_num(first[st]["mean_a"]) for st in states],
             str(gb): [_num(first[st]["mean_b"]) for st in states]}
    out = [head, _plots.svg_occupancy([label[st] for st in states], means, fig_id=figs())]
    extra = [c for c in ("cliffs_delta", "q_value", "favours") if c in sub.columns]
    rows = []
    for st in states:
        r = first[st]
        row = [esc(label[st]), _pct(r["mean_a"]), _pct(r["mean_b"])]
        for c in extra:
            row.append(_fmt_p(r[c]) if c == "q_value" else
                       _fmt(r[c], 2) if c == "cliffs_delta" else
                       (_group_label(r[c], groups) if str(r[c]) else ""))
        rows.append(row)
    heads = ["phase", str(ga), str(gb)] + [
        {"cliffs_delta": "Cliff's delta", "q_value": "q", "favours": "favours"}[c]
        for c in extra]
    nums = (1, 2) + tuple(3 + i for i, c in enumerate(extra) if c != "favours")
    out.append(_table(heads, rows, raw_cells=False, num_cols=nums))
    if len(pairs) > 1:
        out.append(f'<p class="note">{len(pairs) - 1} more pairs of groups in '
                   f"{esc(inp.name)}.</p>")
    return "".join(out)


def _group_table(counts, groups, title="Learners and sequences per group"):
    lpg = counts.get("learners_per_group") or {}
    spg = counts.get("sequences_per_group") or {}
    if not isinstance(lpg, dict) or not isinstance(spg, dict) or not (lpg or spg):
        return ""
    names = _ordered(list(dict.fromkeys([*map(str, lpg), *map(str, spg)])), groups)
    lp = {str(k): v for k, v in lpg.items()}
    sp = {str(k): v for k, v in spg.items()}
    rows = [[_group_label(g, groups), _int(lp.get(g)), _int(sp.get(g))] for g in names]
    return f"<h3>{esc(title)}</h3>" + _table(["group", "learners", "sequences"], rows,
                                             raw_cells=False, num_cols=(1, 2))


def _rejects(inp, counts):
    head = "<h3>Rejected rows</h3>"
    by_reason = counts.get("rejects_by_reason")
    if not inp.ok and isinstance(by_reason, dict) and by_reason:
        ranked = sorted(by_reason.items(), key=lambda kv: (-_num(kv[1], 0.0), str(kv[0])))
        rows = [[esc(r), _int(n)] for r, n in ranked]
        return head + _missing(inp.note) + _table(["reason", "rows"], rows, num_cols=(1,))
    if not inp.ok:
        return head + _missing(inp.note)
    df = inp.value
    if df.empty:
        return head + "<p>No row was rejected.</p>"
    if "reason" not in df.columns:
        return head + _missing("rejects.csv has no 'reason' column")
    counts = df["reason"].value_counts(sort=False)
    ranked = sorted(counts.items(), key=lambda kv: (-kv[1], str(kv[0])))
    rows = [[esc(r), _int(n)] for r, n in ranked[:10]]
    more = (f'<p class="note">{len(ranked) - 10} more reasons in rejects.csv.</p>'
            if len(ranked) > 10 else "")
    return (head + f"<p>{_int(len(df))} rows were set aside; each is listed with its row "
            "number in <code>rejects.csv</code>.</p>"
            + _table(["reason", "rows"], rows, raw_cells=False, num_cols=(1,)) + more)


def _pause_bins(summary):
    enc = summary.get("encoding") or {}
    pause = enc.get("pause") if isinstance(enc, dict) else None
    if not isinstance(pause, dict):
        pause = summary.get("pause") if isinstance(summary.get("pause"), dict) else None
    if "pause_edges_seconds" in summary or "pause_labels" in summary:
        pause = dict(pause or {})
        pause.setdefault("edges", summary.get("pause_edges_seconds") or [])
        pause.setdefault("labels", summary.get("pause_labels") or [])
    if pause is not None:
        enc_cfg = (config_of(summary) or {}).get("encode")
        if isinstance(enc_cfg, dict):
            pause.setdefault("implicit", enc_cfg.get("implicit_pauses") or [])
            pause.setdefault("strategy", enc_cfg.get("pause_strategy"))
    head = "<h3>Pause bins</h3>"
    if not pause:
        return head + _missing("pause bins not recorded in summary.json")
    edges = [_num(e) for e in (pause.get("edges") or [])]
    labels = [str(x) for x in (pause.get("labels") or [])]
    implicit = {str(x) for x in (pause.get("implicit") or [])}
    if not edges and not labels:
        return head + f"<p>No pause tokens (strategy: {esc(pause.get('strategy', 'none'))}).</p>"
    if len(labels) != len(edges) + 1:
        labels = [f"bin {i}" for i in range(len(edges) + 1)]
    bounds = [0.0, *edges, math.inf]
    rows = []
    for i, lab in enumerate(labels):
        lo, hi = bounds[i], bounds[i + 1]
        span = (f"{_duration(lo)} to under {_duration(hi)}" if math.isfinite(hi)
                else f"{_duration(lo)} or more")
        tok = "not written (implicit)" if lab in implicit else _chip(f"pause:{lab}")
        rows.append([esc(lab), span, tok])
    strategy = pause.get("strategy")
    intro = ("<p>The gap before the next action is binned; each bin except implicit ones "
             "becomes a pause token in the sequence"
             + (f" (bins chosen by: {esc(strategy)})" if strategy else "") + ".</p>")
    return head + intro + _table(["bin", "gap", "token"], rows, raw_cells=False)


# --------------------------------------------------------------------------- small helpers


def _h2(sid):
    return f'<h2 id="{sid}">{dict(_SECTIONS)[sid]}</h2>'


def _section(sid, parts):
    return f'<section class="sec-{sid}">\n' + "\n".join(p for p in parts if p) + "\n</section>"


def _missing(reason):
    return f'<p class="note">Not produced in this run ({esc(reason)}).</p>'


def _table(heads, rows, *, raw_cells=False, num_cols=()):
    """HTML table. Cells are HTML already (callers escape); with raw_cells they
    include their own <td>."""
    th = "".join(f'<th{" class=num" if i in num_cols else ""}>{esc(h)}</th>'
                 for i, h in enumerate(heads))
    body = []
    for r in rows:
        if raw_cells:
            cells = "".join(c if c.startswith("<td") else f"<td>{c}</td>" for c in r)
        else:
            cells = "".join(f'<td{" class=num" if i in num_cols else ""}>{c}</td>'
                            for i, c in enumerate(r))
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _chip(tok):
    tok = str(tok)
    cls = "tok pause" if tok.startswith("pause:") else "tok"
    return f'<span class="{cls}">{esc(tok, max_chars=120)}</span>'


def _chips(tokens):
    return '<span class="arrow">→</span>'.join(_chip(t) for t in tokens)


def _split(pattern):
    return [t.strip() for t in str(pattern).split(_SEP)]


def _pattern_label(pattern):
    return " → ".join(_split(pattern))


def _group_label(g, groups):
    g = str(g)
    if g in groups:
        color = _plots.PALETTE[groups.index(g) % len(_plots.PALETTE)]
        return f'<span class="swatch" style="background:{color}"></span><b>{esc(g)}</b>'
    return f"<b>{esc(g)}</b>"


def _ordered(values, groups):
    vals = [str(v) for v in values]
    first = [g for g in ["pooled", "all", *groups] if g in vals]
    return first + sorted(v for v in dict.fromkeys(vals) if v not in first)


def _significant(df, alpha):
    if "q_value" not in df.columns:
        return None
    return df[df["q_value"] <= alpha]


def top_patterns(df, alpha, n):
    keys = df.assign(
        _q=df["q_value"] if "q_value" in df.columns else np.nan,
        _p=df["p_value"] if "p_value" in df.columns else np.nan,
        _e=-df["risk_difference"].abs() if "risk_difference" in df.columns else 0.0,
        _name=df["pattern"].astype(str))
    keys = keys.sort_values(["_q", "_p", "_e", "_name"], kind="mergesort", na_position="last")
    if "q_value" in df.columns:
        sig = keys[keys["_q"] <= alpha]
        if len(sig):
            shown = sig.head(n)
            return shown, (f"{len(sig)} patterns have q ≤ {alpha:g}; the {len(shown)} with "
                           "the smallest q are shown, most reliable first.")
        return keys.head(n), (f"No pattern reached q ≤ {alpha:g}. The {min(n, len(keys))} "
                              "with the smallest q are shown for orientation only.")
    return keys.head(n), ("patterns.csv has no q_value column; patterns are ordered by p "
                          "value without correction for multiple testing.")


def _matrix(tm, n):
    try:
        a = np.asarray(tm, dtype=float)
    except (TypeError, ValueError):
        return None
    return a if a.shape == (n, n) else None


def _five_numbers(obj):
    if not isinstance(obj, dict) or not obj:
        return {}
    out = {}
    for g, v in obj.items():
        if isinstance(v, dict) and all(_is_num(v.get(k)) for k in ("min", "q1", "median", "q3",
                                                                     "max")):
            out[str(g)] = {k: float(v[k]) for k in ("min", "q1", "median", "q3", "max")}
            if _is_num(v.get("n")):
                out[str(g)]["n"] = v["n"]
        elif isinstance(v, list):
            x = np.asarray([_num(t) for t in v], dtype=float)
            x = x[np.isfinite(x)]
            if x.size:
                q = np.quantile(x, [0, 0.25, 0.5, 0.75, 1])
                out[str(g)] = dict(zip(("min", "q1", "median", "q3", "max"), map(float, q)),
                                   n=int(x.size))
    return out


def _describe_grouping(v):
    if isinstance(v, dict):
        rule = v.get("rule")
        rest = [f"{esc(k)} {_fmt(x, 3) if _is_num(x) else esc(x)}"
                for k, x in v.items() if k != "rule"]
        text = f"rule: {esc(rule)}" if rule is not None else ""
        return "; ".join([t for t in [text, ", ".join(rest)] if t]) or "–"
    return esc(v)


def _metric_head(c):
    if c.startswith("recall_"):
        return f"recall {c[len('recall_'):]}"
    return {"roc_auc": "ROC AUC", "balanced_accuracy": "balanced accuracy"}.get(c, c)


def _plural(n, word):
    return f"{_int(n)} {word}" + ("" if n == 1 else "s")


def _true(v):
    return v is True or str(v).strip().lower() in ("true", "1", "yes")


def _str_list(v, n):
    if isinstance(v, list) and len(v) == n:
        return [str(x) for x in v]
    return None


def _is_num(v):
    if isinstance(v, bool):
        return False
    try:
        return math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _num(v, default=math.nan):
    if isinstance(v, bool):
        return default
    try:
        return float(v)
    except (TypeError, ValueError):
        return default


def _int(v):
    x = _num(v)
    return f"{int(round(x)):,}" if math.isfinite(x) else "–"


def _fmt(v, digits):
    x = _num(v)
    if not math.isfinite(x):
        return "–" if not (isinstance(x, float) and math.isinf(x)) else ("∞" if x > 0 else "−∞")
    return f"{x:,.{digits}f}"


def _fmt_p(v):
    x = _num(v)
    if not math.isfinite(x):
        return "–"
    if x < 0.001:
        return "&lt; 0.001"
    return f"{x:.3f}"


def _pct(v):
    x = _num(v)
    return f"{100 * x:.0f}%" if math.isfinite(x) else "–"


def _duration(seconds):
    s = _num(seconds)
    if not math.isfinite(s):
        return "–"
    if s < 60:
        return f"{s:.0f} s" if s >= 10 or s == int(s) else f"{s:.1f} s"
    if s < 3600:
        return f"{s / 60:.1f} min"
    return f"{s / 3600:.1f} h"


def _clock(seconds):
    s = max(0, int(round(seconds)))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"+{h}:{m:02d}:{sec:02d}" if h else f"+{m}:{sec:02d}"
