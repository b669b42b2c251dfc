"""HTML building blocks of the report (private; see :mod:`seqmine.reporting.render`).

Page constants and style, escaping, summary look-ups, tables, token chips and number
formatting. Every value that comes from the data passes through :func:`esc`
(``html.escape`` with ``quote=True`` after removing control characters); numbers are
formatted here, never taken as text from the files.
"""

from __future__ import annotations

import contextvars
import json
import math
import re
from html import escape

import numpy as np

from .._util.text import replace_control_characters
from ..mining.patterns import pattern_id
from . import plots as _plots

__all__ = ["esc", "esc_message", "lookup", "config_of", "counts_of", "group_names_of", "top_patterns",
           "FigureIds", "PAGE_TITLE", "CSS", "CONFIG_SECTIONS", "LABELS", "label_of",
           "wrap_figures", "PATTERN_SEPARATOR", "row_tokens", "row_excerpts"]

PAGE_TITLE = "seqmine report: behaviour patterns and outcomes"
#: How the report writes a pattern: the tokens joined as in patterns.csv.
PATTERN_SEPARATOR = " > "
_SEP = PATTERN_SEPARATOR
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
.grid2 { display:grid; grid-template-columns: repeat(auto-fit, minmax(min(440px, 100%), 1fr));
  gap: 4px 24px; align-items: start; }
.grid1 .fig { max-width: 760px; }
.grid2 table, .grid1 table { width: 100%; max-width: 760px; font-size: 13px; }
.grid2 td:first-child, .grid1 td:first-child { width: 34%; overflow-wrap: anywhere; }
td .pair { white-space: nowrap; }
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
.stats.evidence { font-size: 13px; color: var(--muted); }
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
.tablebox { max-width: 100%; overflow-x: auto; margin: 8px 0 14px; }
.tablebox > table { margin: 0; }
.figbox { max-width: 100%; overflow-x: auto; }
.figbox > svg.fig { min-width: var(--minw, 0); }
.explorer .ex-controls { display:flex; flex-wrap:wrap; gap: 6px 16px; align-items:flex-end;
  margin: 8px 0; font-size: 14px; }
.explorer label { display:flex; flex-direction:column; gap:2px; color: var(--muted); }
.explorer label.check { flex-direction:row; align-items:center; gap:6px; }
.explorer input, .explorer select, .explorer button { font: inherit; color: var(--ink); }
.explorer input[type=search] { min-width: 12em; }
.ex-pager { display:flex; flex-wrap:wrap; align-items:center; gap: 6px 12px; margin: 6px 0;
  font-size: 14px; }
.ex-table th button { font: inherit; font-weight: 600; background: none; border: 0;
  padding: 0; cursor: pointer; color: var(--ink); text-align: inherit; }
.ex-table th[aria-sort=ascending] button::after { content: " ▲"; font-size: 10px; }
.ex-table th[aria-sort=descending] button::after { content: " ▼"; font-size: 10px; }
.ex-table td { white-space: nowrap; }
.ex-table td.pat { white-space: normal; min-width: 18em; }
.glance-no { font-weight: 600; }
@media (max-width: 640px) {
  main { padding: 14px 12px 8px; }
  footer { padding: 12px 12px 24px; }
  h1 { font-size: 22px; }
  nav.toc ol { columns: 1; }
  .bars { grid-template-columns: minmax(60px, max-content) 1fr 4em; }
  article.card { padding: 8px 10px 10px; }
}
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { background: #fff; font-size: 9.5pt; line-height: 1.4; }
  h2 { font-size: 15pt; } h3 { font-size: 11pt; margin: 8px 0 4px; }
  p { margin: 3px 0 6px; }
  article.card { padding: 4px 10px 6px; margin: 6px 0; border-radius: 0; }
  .stats, .bars, .excerpt .who { font-size: 8pt; }
  .tok { font-size: 8pt; }
  blockquote.hint { padding: 3px 8px; }
  main, footer { max-width: none; padding: 0; }
  h2 { break-before: page; border-top: 0; margin-top: 0; }
  h2, h3 { break-after: avoid; }
  article.card, .figbox, .keybox { break-inside: avoid; }
  nav.toc, #explorer-ui, #explorer-fallback { display: none; }
  .tablebox, .figbox { overflow: visible; }
  .figbox > svg.fig { min-width: 0; max-width: 100%; }
  table { max-width: 100%; font-size: 8pt; }
  th, td { padding: 2px 5px; overflow-wrap: anywhere; }
  .grid2 { display: block; }
  pre { white-space: pre-wrap; overflow-wrap: anywhere; max-height: none; }
  a { color: inherit; text-decoration: none; }
  .print-only { display: block; }
}
.print-only { display: none; }
code.nw { white-space: nowrap; }
"""


def esc(value, max_chars=400):
    """HTML-escaped text of any value, control characters removed, length bounded.

    Examples
    --------
    >>> esc('<script>alert("x")</script>')
    '&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;'
    """
    s = replace_control_characters(str(value), keep_layout=True)
    if len(s) > max_chars:
        s = s[: max_chars - 1] + "…"
    return escape(s, quote=True)


#: Technical words inside a message: configuration keys (``phases.max_states``), file
#: names (``model_group-weak.json``), option flags (``--states``) and other words with an
#: underscore. Matched on the escaped text, so they hold no markup.
_TECHNICAL_WORD = re.compile(
    r"(?<![\w&;/.-])(?:--[a-z][\w-]*|"
    r"(?:/?[\w.-]+/)*[\w-]+(?:\.(?:json|jsonl|csv|tsv|parquet|html|toml|gz))+"
    r"(?![\w])|[\w.-]*_[\w.-]*\w)")


def esc_message(value, max_chars=400):
    """Like :func:`esc`, with configuration keys, file names and flags set as code.

    Messages written for the console name options and files; in the report these read
    as code, not as prose.

    Examples
    --------
    >>> esc_message("try --states 2-7 or phases.max_states = 7")
    'try <code class="nw">--states</code> 2-7 or <code>phases.max_states</code> = 7'
    >>> esc_message("events.csv.gz: 3 rows")
    '<code>events.csv.gz</code>: 3 rows'
    """
    def code(m):
        word = m.group(0)
        # an option flag stays on one line (a break after "--" reads as two words)
        return f'<code class="nw">{word}</code>' if word.startswith("--") else \
            f"<code>{word}</code>"

    return _TECHNICAL_WORD.sub(code, esc(value, max_chars))


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


_SECTIONS = [("overview", "Data overview"), ("patterns", "Patterns that differ between groups"),
             ("explorer", "All scored patterns"),
             ("tokens", "What each group does more of"),
             ("transitions", "Which action follows which"), ("phases", "Phases of work"),
             ("early-prediction", "How early can outcomes be recognised?"),
             ("detectors", "Detectors for hints"), ("method", "Method"),
             ("cautions", "Cautions")]


# --------------------------------------------------------------------------- helpers


def _h2(sid):
    return f'<h2 id="{sid}">{dict(_SECTIONS)[sid]}</h2>'


def _section(sid, parts):
    parts = list(parts)
    ranges = PAUSE_RANGES.get()
    if sid in _PAUSE_KEY_SECTIONS and ranges:
        parts.append('<p class="note">Pause tokens: ' + "; ".join(
            f"{esc(tok)} = {esc(text)}" for tok, text in ranges.items()) + ".</p>")
    return f'<section class="sec-{sid}">\n' + "\n".join(p for p in parts if p) + "\n</section>"


def _missing(reason):
    return f'<p class="note">Not produced in this run ({esc(reason)}).</p>'


def _table(heads, rows, *, raw_cells=False, num_cols=()):
    """HTML table in its own horizontal scroll box (so a wide table never widens the
    page). Cells are HTML already (callers escape); with raw_cells they include their
    own <td>."""
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
    return (f'<div class="tablebox"><table><thead><tr>{th}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


#: Pause token -> its range in seconds, for the page being written (set by render).
PAUSE_RANGES = contextvars.ContextVar("pause_ranges", default={})

#: Sections whose figures name pause tokens: they end with a key to the ranges.
_PAUSE_KEY_SECTIONS = ("patterns", "explorer", "transitions", "phases")


def _chip(tok):
    tok = str(tok)
    if not tok.startswith("pause:"):
        return f'<span class="tok">{esc(tok, max_chars=120)}</span>'
    span = PAUSE_RANGES.get().get(tok)
    extra = f'<small class="range">{esc(span)}</small>' if span else ""
    return f'<span class="tok pause">{esc(tok, max_chars=120)}{extra}</span>'


def _chips(tokens):
    return '<span class="arrow">&gt;</span>'.join(_chip(t) for t in tokens)


def _split(pattern):
    return [t.strip() for t in str(pattern).split(_SEP)]


def row_tokens(row):
    """Tokens of a patterns.csv row: its ``tokens`` column (exact) when present and
    readable, else the ``pattern`` text split at `` > ``."""
    text = row.get("tokens") if hasattr(row, "get") else None
    if isinstance(text, str) and text.strip():
        try:
            items = json.loads(text)
        except ValueError:
            items = None
        if isinstance(items, list) and items and all(isinstance(t, str) for t in items):
            return items
    return _split(row["pattern"])


def row_excerpts(examples, row):
    """The excerpts of ``examples.json``'s ``patterns`` for a patterns.csv row: keyed by
    ``pattern_id`` (or, in files written before pattern ids, by the pattern text)."""
    pid = row.get("pattern_id") if hasattr(row, "get") else None
    if not (isinstance(pid, str) and pid.strip()):
        pid = pattern_id(row_tokens(row))
    if pid in examples:
        return examples[pid]
    return examples.get(str(row["pattern"]))


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
        if isinstance(v, dict) and all(_is_finite(v.get(k)) for k in ("min", "q1", "median", "q3",
                                                                     "max")):
            out[str(g)] = {k: float(v[k]) for k in ("min", "q1", "median", "q3", "max")}
            if _is_finite(v.get("n")):
                out[str(g)]["n"] = v["n"]
        elif isinstance(v, list):
            x = np.asarray([_as_float(t) for t in v], dtype=float)
            x = x[np.isfinite(x)]
            if x.size:
                q = np.quantile(x, [0, 0.25, 0.5, 0.75, 1])
                out[str(g)] = dict(zip(("min", "q1", "median", "q3", "max"), map(float, q)),
                                   n=int(x.size))
    return out


def _describe_grouping(v):
    """Readable rule of the outcome groups (``summary.json`` ``grouping``)."""
    if isinstance(v, dict) and v.get("rule") in _RULES and all(
            _is_finite(v.get(k)) for k in ("low", "high")):
        return esc(_RULES[v["rule"]].format(low=_fmt(v["low"], 2), high=_fmt(v["high"], 2)))
    if isinstance(v, dict) and v.get("rule") == "label":
        return "the groups named in the outcome table's label column"
    if isinstance(v, dict):
        rule = v.get("rule")
        rest = [f"{esc(k)} {_fmt(x, 3) if _is_finite(x) else esc(x)}"
                for k, x in v.items() if k != "rule"]
        text = f"rule: {esc(rule)}" if rule is not None else ""
        return "; ".join([t for t in [text, ", ".join(rest)] if t]) or "–"
    return esc(v)


_RULES = {
    "median": "median split of the outcome at {low}, the learners above it forming the "
              "better group",
    "fraction": "top and bottom shares of the outcome, at or above {high} and at or below "
                "{low}; the learners between get no group",
    "thresholds": "fixed cut points, at or above {high} and below {low}; the learners "
                  "between get no group",
}


def _metric_head(c):
    return label_of(c)


#: Readable label of every column or value name the report shows (one vocabulary for
#: the tables, the cards, the explorer and the detector evidence).
LABELS = {
    "pattern": "pattern", "pattern_id": "pattern id", "length": "length",
    "favours": "favours", "p_value": "p", "q_value": "q",
    "p_volume": "p (volume-adjusted)", "q_volume": "q (volume-adjusted)",
    "p_order": "p (order)", "q_order": "q (order)", "evidence": "evidence",
    "kind": "evidence", "risk_difference": "risk difference", "odds_ratio": "odds ratio",
    "log_odds_ratio": "log odds ratio", "growth_rate": "growth rate",
    "cohens_h": "Cohen's h", "cliffs_delta": "Cliff's delta", "cramers_v": "Cramér's V",
    "p_rate": "p (rates)", "q_rate": "q (rates)", "stability": "stability",
    "replication": "replication", "redundant_of": "near-duplicate of",
    "support": "support", "rate": "rate per 100 tokens", "n": "sequences",
    "effects": "effect sizes",
    "classifier": "classifier", "fraction": "observed", "n_learners": "held-out learners",
    "n_repeats": "repetitions", "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy", "roc_auc": "ROC AUC",
    "baseline_accuracy": "majority baseline accuracy", "baseline": "majority baseline",
    "beats_baseline": "beats baseline", "n_classifier_better": "learners better classified",
    "n_baseline_better": "learners better by baseline",
    "count": "count", "probability": "share of next steps", "expected": "expected count",
    "adjusted_residual": "adjusted residual", "yules_q": "Yule's Q",
    "q_difference": "q (groups differ)", "p_difference": "p (groups differ)",
    "n_states": "phases", "bic": "BIC", "heldout_loglik": "held-out log-likelihood",
    "model": "model", "group": "group",
}
_PREFIXED = {"support_": "support", "rate_": "rate", "recall_": "recall"}


def label_of(key):
    """Readable label of a column or value name.

    Examples
    --------
    >>> label_of("cohens_h"), label_of("support_strong"), label_of("n_learners")
    ("Cohen's h", 'support strong', 'held-out learners')
    """
    key = str(key)
    if key in LABELS:
        return LABELS[key]
    for prefix, word in _PREFIXED.items():
        if key.startswith(prefix):
            return f"{word} {key[len(prefix):]}"
    return key.replace("_", " ")


_SVG_ROOT = re.compile(r'<svg role="img"[^>]*class="fig"[^>]*width="([\d.]+)pt"[^>]*>')


def wrap_figures(html, min_scale=0.75):
    """Put every report figure in a box that scrolls sideways on narrow screens.

    A figure shrinks with the page down to ``min_scale`` of its drawn size (so text
    drawn at 9 pt stays at least 9 px tall), then its box scrolls instead.

    Examples
    --------
    >>> wrap_figures('<svg role="img" class="fig" width="300pt" height="9pt"></svg>')
    '<div class="figbox" style="--minw:300px"><svg role="img" class="fig" width="300pt" height="9pt"></svg></div>'
    """
    out, pos = [], 0
    for m in _SVG_ROOT.finditer(html):
        end = html.find("</svg>", m.end())
        if end < 0:
            break
        end += len("</svg>")
        width_px = float(m.group(1)) * 4 / 3 * min_scale
        out.append(html[pos:m.start()])
        out.append(f'<div class="figbox" style="--minw:{width_px:.0f}px">'
                   + html[m.start():end] + "</div>")
        pos = end
    out.append(html[pos:])
    return "".join(out)


def _plural(n, word):
    return f"{_int(n)} {word}" + ("" if n == 1 else "s")


def _true(v):
    return v is True or str(v).strip().lower() in ("true", "1", "yes")


def _str_list(v, n):
    if isinstance(v, list) and len(v) == n:
        return [str(x) for x in v]
    return None


def _is_finite(v):
    """True when ``v`` converts to a finite float (numbers and numeric strings, not booleans)."""
    if isinstance(v, bool):
        return False
    try:
        return math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _as_float(v, default=math.nan):
    """``float(v)`` (infinities kept), or ``default`` for booleans and non-numbers."""
    if isinstance(v, bool):
        return default
    try:
        return float(v)
    except (TypeError, ValueError):
        return default


def _int(v):
    x = _as_float(v)
    return f"{int(round(x)):,}" if math.isfinite(x) else "–"


def _fmt(v, digits):
    x = _as_float(v)
    if not math.isfinite(x):
        return "–" if not (isinstance(x, float) and math.isinf(x)) else ("∞" if x > 0 else "−∞")
    return f"{x:,.{digits}f}"


def _fmt_p(v):
    x = _as_float(v)
    if not math.isfinite(x):
        return "–"
    if x < 0.001:
        return "&lt; 0.001"
    return f"{x:.3f}"


def _pct(v):
    x = _as_float(v)
    return f"{100 * x:.0f}%" if math.isfinite(x) else "–"


def _duration(seconds):
    s = _as_float(seconds)
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
