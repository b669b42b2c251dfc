"""The pattern explorer of the report: every scored pattern in one sortable table.

The table is filled in the browser by a small inline script from a JSON data block;
the script is allowed by its SHA-256 hash in the page's Content-Security-Policy
(:func:`script_hash`), so nothing else can run and the page still loads nothing from
the network. The script builds every cell with ``textContent`` (never parses data as
HTML), so the escaping of the rest of the page is not needed for it; the data block
itself is JSON with ``<``, ``>``, ``&`` and ``'`` written as ``\\u003c``, ``\\u003e``,
``\\u0026`` and ``\\u0027``, so no log string can close it.

Without scripts (switched off, or the page edited so the hash no longer matches) the
section shows a short note, the top findings stay in the pattern cards above it, and
``patterns.csv`` holds every pattern.
"""

from __future__ import annotations

import base64
import hashlib
import json
import math

import numpy as np

from ..config import DEFAULT_CONFIG
from . import plots as _plots
from .html import _h2, _missing, _section, esc, label_of

__all__ = ["section_explorer", "EXPLORER_SCRIPT", "script_hash", "explorer_columns"]

#: Rows placed in the page at most (the most reliable first); patterns.csv has all.
DEFAULT_MAX_ROWS = DEFAULT_CONFIG["report"]["explorer_rows"]

#: Optional columns of patterns.csv shown when present, with their kind.
_OPTIONAL = [("cohens_h", "num2"), ("risk_difference", "num2"), ("q_value", "p"),
             ("q_volume", "p"), ("q_order", "p"), ("evidence", "text"), ("stability", "num2"),
             ("replication", "pct")]

# The explorer script. Plain ES5, no library; builds every cell with textContent.
EXPLORER_SCRIPT = r"""
(function () {
  "use strict";
  var root = document.getElementById("explorer-ui");
  var src = document.getElementById("explorer-data");
  if (!root || !src) { return; }
  var data = JSON.parse(src.textContent);
  var cols = data.columns, rows = data.rows;
  var $ = function (id) { return document.getElementById(id); };
  var body = $("ex-body"), status = $("ex-status");
  var state = {sort: 0, desc: false, page: 0, size: 25};
  var col = {};
  cols.forEach(function (c, i) { col[c.key] = i; });
  function isNum(v) { return typeof v === "number" && isFinite(v); }
  function fmt(v, kind) {
    if (v === null || v === undefined || v === "") { return kind === "text" ? "" : "\u2013"; }
    if (kind === "p") { return v < 0.001 ? "< 0.001" : v.toFixed(3); }
    if (kind === "pct") { return Math.round(100 * v) + "%"; }
    if (kind === "num2") { return v.toFixed(2); }
    if (kind === "int") { return String(Math.round(v)); }
    return String(v);
  }
  function tokensCell(td, text) {
    var parts = String(text).split(" > ");
    parts.forEach(function (t, k) {
      if (k) { var a = document.createElement("span"); a.className = "arrow";
               a.textContent = ">"; td.appendChild(a); }
      var s = document.createElement("span");
      s.className = t.indexOf("pause:") === 0 ? "tok pause" : "tok";
      s.textContent = t; td.appendChild(s);
    });
  }
  function groupCell(td, g) {
    if (!g) { return; }
    var k = data.groups.indexOf(g);
    if (k >= 0) { var w = document.createElement("span");
                  w.className = "swatch g" + (k % 6); td.appendChild(w); }
    var b = document.createElement("b"); b.textContent = g; td.appendChild(b);
  }
  function filters() {
    var ev = $("ex-evidence"), d = $("ex-distinct"), f = $("ex-favours").value;
    return {words: $("ex-text").value.toLowerCase().split(/\s+/).filter(Boolean),
            favours: f.indexOf("g:") === 0 ? data.groups[Number(f.slice(2))] : f,
            evidence: ev ? ev.value : "", length: $("ex-length").value,
            q: $("ex-q").value, distinct: d ? d.checked : false};
  }
  function passes(r, f) {
    var pat = String(r[col.pattern]).toLowerCase();
    for (var i = 0; i < f.words.length; i++) {
      if (pat.indexOf(f.words[i]) < 0) { return false; }
    }
    if (f.favours === "none" ? r[col.favours] : (f.favours && r[col.favours] !== f.favours)) {
      return false;
    }
    if (f.evidence && (r[col.evidence] || "none") !== f.evidence) { return false; }
    if (f.length && String(r[col.length]) !== f.length) { return false; }
    if (f.q && !(isNum(r[col.q_value]) && r[col.q_value] <= Number(f.q))) { return false; }
    if (f.distinct && r[col._redundant]) { return false; }
    return true;
  }
  function compare(a, b) {
    var i = state.sort, x = a[i], y = b[i], sign = state.desc ? -1 : 1;
    var xm = x === null || x === "" || x === undefined, ym = y === null || y === "" || y === undefined;
    if (xm || ym) { return xm === ym ? a[col._rank] - b[col._rank] : (xm ? 1 : -1); }
    if (isNum(x) && isNum(y)) { if (x !== y) { return sign * (x - y); } }
    else { var c = String(x).localeCompare(String(y)); if (c) { return sign * c; } }
    return a[col._rank] - b[col._rank];
  }
  function render() {
    var f = filters();
    var shown = rows.filter(function (r) { return passes(r, f); });
    shown.sort(compare);
    var pages = Math.max(1, Math.ceil(shown.length / state.size));
    state.page = Math.min(state.page, pages - 1);
    var start = state.page * state.size, end = Math.min(shown.length, start + state.size);
    while (body.firstChild) { body.removeChild(body.firstChild); }
    for (var i = start; i < end; i++) {
      var tr = document.createElement("tr");
      cols.forEach(function (c, j) {
        if (c.hidden) { return; }
        var td = document.createElement("td"), v = shown[i][j];
        if (c.kind === "tokens") { td.className = "pat"; tokensCell(td, v); }
        else if (c.kind === "group") { groupCell(td, v); }
        else { td.textContent = fmt(v, c.kind); if (c.kind !== "text") { td.className = "num"; } }
        tr.appendChild(td);
      });
      body.appendChild(tr);
    }
    status.textContent = shown.length ? ("Patterns " + (start + 1) + "\u2013" + end + " of " +
      shown.length + " shown (" + rows.length + " in the table)") :
      ("No pattern matches these filters (" + rows.length + " in the table).");
    $("ex-prev").disabled = state.page === 0;
    $("ex-next").disabled = state.page >= pages - 1;
    var heads = root.querySelectorAll("thead th");
    for (var h = 0; h < heads.length; h++) {
      var k = Number(heads[h].getAttribute("data-col"));
      heads[h].setAttribute("aria-sort", k === state.sort ?
        (state.desc ? "descending" : "ascending") : "none");
    }
  }
  function again() { state.page = 0; render(); }
  ["ex-text", "ex-favours", "ex-evidence", "ex-length", "ex-q", "ex-distinct"].forEach(
    function (id) { var el = $(id); if (el) { el.addEventListener("input", again);
                                               el.addEventListener("change", again); } });
  $("ex-size").addEventListener("change", function () {
    state.size = Number($("ex-size").value); again(); });
  $("ex-prev").addEventListener("click", function () { state.page -= 1; render(); });
  $("ex-next").addEventListener("click", function () { state.page += 1; render(); });
  var buttons = root.querySelectorAll("thead button");
  for (var b = 0; b < buttons.length; b++) {
    buttons[b].addEventListener("click", function (ev) {
      var k = Number(ev.currentTarget.getAttribute("data-col"));
      if (state.sort === k) { state.desc = !state.desc; }
      else { state.sort = k; state.desc = cols[k].kind !== "text" && cols[k].kind !== "tokens" &&
                                         cols[k].kind !== "group" && cols[k].desc === true; }
      render();
    });
  }
  state.sort = col._rank;
  $("explorer-fallback").hidden = true;
  root.hidden = false;
  render();
})();
""".strip()


def script_hash(script=EXPLORER_SCRIPT):
    """The CSP source expression that allows exactly ``script`` (``'sha256-...'``).

    Examples
    --------
    >>> script_hash("alert(1)")
    "'sha256-bhHHL3z2vDgxUt0W3dWQOrprscmda2Y5pLsLg4GF+pI='"
    """
    digest = hashlib.sha256(script.encode("utf-8")).digest()
    return f"'sha256-{base64.b64encode(digest).decode('ascii')}'"


def explorer_columns(df, groups):
    """Columns of the explorer for a patterns table: ``[{key, label, kind}]``.

    Kinds: ``tokens`` (the pattern), ``group``, ``text``, ``int``, ``num2`` (two
    decimals), ``pct`` (share shown as a percentage) and ``p`` (p or q value).
    ``_rank`` (the row order of patterns.csv) and ``_redundant`` are hidden helpers.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"pattern": ["a > b"], "length": [2], "support_s": [0.5],
    ...                    "q_value": [0.01], "favours": ["s"]})
    >>> [c["key"] for c in explorer_columns(df, ["s"])]
    ['_rank', 'pattern', 'length', 'favours', 'support_s', 'q_value', '_redundant']
    """
    cols = [{"key": "_rank", "label": "#", "kind": "int"}]
    cols.append({"key": "pattern", "label": label_of("pattern"), "kind": "tokens"})
    cols.append({"key": "length", "label": label_of("length"), "kind": "int"})
    cols.append({"key": "favours", "label": label_of("favours"), "kind": "group"})
    for g in groups:
        if f"support_{g}" in df.columns:
            cols.append({"key": f"support_{g}", "label": f"support {g}", "kind": "pct",
                         "desc": True})
    for key, kind in _OPTIONAL:
        if key in df.columns:
            cols.append({"key": key, "label": label_of(key), "kind": kind,
                         "desc": key in ("stability", "replication")})
    if "pattern_id" in df.columns:  # the stable id of patterns.csv, last (it is long)
        cols.append({"key": "pattern_id", "label": label_of("pattern_id"), "kind": "text"})
    cols.append({"key": "_redundant", "label": "", "kind": "int", "hidden": True})
    return cols


def section_explorer(d, *, max_rows=DEFAULT_MAX_ROWS):
    """Every scored pattern in one table: sort, filter and page it in the browser."""
    out = [_h2("explorer"),
           "<p>Every pattern scored in this run, in one table. Click a column head to sort "
           "(again to reverse); filter by words of the pattern, the group it favours"
           + (", the kind of evidence" if _has(d, "evidence") else "")
           + ", its length and its q value; page through the rest. The "
           "same patterns, with every column, are in <a href=\"patterns.csv\">patterns.csv"
           "</a>.</p>"]
    inp = d["patterns"]
    if not inp.ok:
        return _section("explorer", out + [_missing(inp.note)])
    df = inp.value
    if "pattern" not in df.columns or df.empty:
        return _section("explorer", out + ['<p class="note">No scored pattern.</p>'])
    groups = d["groups"]
    df = df.reset_index(drop=True)
    if "length" not in df.columns:
        df = df.assign(length=[len(str(p).split(" > ")) for p in df["pattern"]])
    if "favours" not in df.columns:
        df = df.assign(favours="")
    n_all = len(df)
    df = df.assign(_rank=np.arange(1, n_all + 1))
    red = (df["redundant_of"].astype(str).str.strip().replace("nan", "") != ""
           if "redundant_of" in df.columns else np.zeros(n_all, bool))
    df = df.assign(_redundant=np.asarray(red, dtype=int))
    cut = ""
    if n_all > max_rows:
        df = df.head(max_rows)
        cut = (f'<p class="note">The table holds the first {max_rows:,} of {n_all:,} patterns '
               "(in the order of patterns.csv: most reliable first); all are in "
               "patterns.csv.</p>")
    cols = explorer_columns(df, groups)
    rows = [[_cell(r[c["key"]], c["kind"]) for c in cols]
            for r in df[[c["key"] for c in cols]].to_dict("records")]
    payload = {"columns": cols, "rows": rows, "groups": list(groups)}
    out.append(f'<div id="explorer-fallback"><p class="note">The interactive table needs '
               f"JavaScript, which is off or blocked here. The most reliable patterns are "
               f'shown as cards in <a href="#patterns">Patterns that differ between '
               f"groups</a>; all {n_all:,} are in <a href=\"patterns.csv\">patterns.csv</a>."
               "</p></div>")
    out.append('<div id="explorer-ui" class="explorer" hidden>' + _controls(df, cols, groups)
               + _table_shell(cols) + "</div>")
    out.append(cut)
    out.append('<script type="application/json" id="explorer-data">' + _json(payload)
               + "</script>")
    return _section("explorer", out)


def _has(d, column):
    df = d["patterns"].value
    return df is not None and column in df.columns


def _cell(v, kind):
    if kind in ("text", "tokens", "group"):
        return "" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v)
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(x):
        return None
    return int(x) if kind == "int" else round(x, 6)


def _controls(df, cols, groups):
    fav = ['<option value="">any group</option>'] + [
        f'<option value="g:{k}">{esc(g)}</option>' for k, g in enumerate(groups)] + [
        '<option value="none">no group</option>']
    parts = ['<div class="ex-controls">',
             '<label>Pattern contains <input type="search" id="ex-text" '
             'placeholder="e.g. reset" autocomplete="off"></label>',
             f'<label>Favours <select id="ex-favours">{"".join(fav)}</select></label>']
    if "evidence" in df.columns:
        kinds = [k for k in ("order", "presence", "volume")]
        opts = ['<option value="">any</option>'] + [
            f'<option value="{k}">{k}</option>' for k in kinds] + [
            '<option value="none">none</option>']
        parts.append(f'<label>Evidence <select id="ex-evidence">{"".join(opts)}</select></label>')
    lengths = sorted({int(x) for x in df["length"] if _finite(x)})
    parts.append('<label>Length <select id="ex-length"><option value="">any</option>'
                 + "".join(f'<option value="{n}">{n}</option>' for n in lengths)
                 + "</select></label>")
    if any(c["key"] == "q_value" for c in cols):
        parts.append('<label>q at most <select id="ex-q"><option value="">any</option>'
                     + "".join(f'<option value="{q}">{q}</option>'
                               for q in ("0.001", "0.01", "0.05", "0.1"))
                     + "</select></label>")
    else:
        parts.append('<select id="ex-q" hidden><option value=""></option></select>')
    if "redundant_of" in df.columns:
        parts.append('<label class="check"><input type="checkbox" id="ex-distinct"> hide '
                     "near-duplicates</label>")
    parts.append('<label>Rows per page <select id="ex-size">'
                 + "".join(f'<option value="{n}">{n}</option>' for n in (25, 50, 100, 250))
                 + "</select></label></div>")
    parts.append('<div class="ex-pager"><button type="button" id="ex-prev">‹ previous</button>'
                 '<span id="ex-status" role="status"></span>'
                 '<button type="button" id="ex-next">next ›</button></div>')
    return "".join(parts)


def _table_shell(cols):
    heads = []
    for i, c in enumerate(cols):
        if c.get("hidden"):
            continue
        cls = "" if c["kind"] in ("text", "tokens", "group") else ' class="num"'
        heads.append(f'<th{cls} data-col="{i}" aria-sort="none"><button type="button" '
                     f'data-col="{i}">{esc(c["label"])}</button></th>')
    return ('<div class="tablebox"><table class="ex-table"><thead><tr>' + "".join(heads)
            + '</tr></thead><tbody id="ex-body"></tbody></table></div>')


def _finite(x):
    try:
        return math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def _json(obj):
    """JSON safe inside a script element: no '<', '>', '&' or "'" appears literally."""
    text = json.dumps(obj, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    return (text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
            .replace("'", "\\u0027")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))


def swatch_css():
    """CSS classes ``.swatch.g0`` ... giving the group colours used by the explorer."""
    return "".join(f".swatch.g{i} {{ background:{c}; }}\n" for i, c in enumerate(_plots.PALETTE))
