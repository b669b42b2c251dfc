"""Pieces of the report's sections: cards, excerpts, tables (private).

See :mod:`seqmine.reporting.render`. Every data-derived string is escaped with
:func:`seqmine.reporting.html.esc`.
"""

from __future__ import annotations

import json
import math

import numpy as np

from . import plots as _plots
from .html import (
    _as_float,
    _chip,
    _chips,
    _clock,
    _duration,
    _fmt,
    _fmt_p,
    _group_label,
    _int,
    _is_finite,
    _missing,
    _ordered,
    _pct,
    _plural,
    _split,
    _table,
    _true,
    config_of,
    esc,
    label_of,
    row_tokens,
)

__all__ = []

def _pattern_card(rank, row, sup_cols, groups, alpha, excerpts, examples, max_examples):
    tokens = row_tokens(row)
    out = ['<article class="card">',
           f'<h3><span class="rank">{rank}.</span>{_chips(tokens)}</h3>']
    fav = str(row.get("favours", "") or "")
    q = _as_float(row.get("q_value"))
    kind = str(row.get("evidence", "") or "")
    reading = {"order": " (in this order, beyond the items' frequency and activity)",
               "presence": " (at equal activity)",
               "volume": " (only before adjusting for activity)"}.get(kind, "")
    if fav:
        out.append(f"<p>More common among {_group_label(fav, groups)} learners{reading}.</p>")
    elif math.isfinite(q) and q > alpha:
        out.append('<p class="note">No reliable difference between groups.</p>')
    if sup_cols:
        out.append('<div class="bars">')
        for g, c in sup_cols:
            v = _as_float(row[c])
            width = f"{100 * min(max(v, 0.0), 1.0):.1f}" if math.isfinite(v) else "0"
            color = _plots.PALETTE[groups.index(g) % len(_plots.PALETTE)]
            out.append(f"<span>{esc(g)}</span><div class=\"bar\"><span style=\"width:{width}%;"
                       f"background:{color}\"></span></div><span>{_pct(v)}</span>")
        out.append("</div>")
    stats = []
    for label, col, digits in [("q", "q_value", None), ("p", "p_value", None),
                               ("q (equal activity)", "q_volume", None),
                               ("q (order)", "q_order", None),
                               ("risk difference", "risk_difference", 2),
                               ("odds ratio", "odds_ratio", 2), ("Cohen's h", "cohens_h", 2),
                               ("Cliff's delta", "cliffs_delta", 2),
                               ("Cramér's V", "cramers_v", 2), ("q (rates)", "q_rate", None),
                               ("stability", "stability", 2),
                               ("replication", "replication", 2), ("length", "length", 0)]:
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
    t0 = next((_as_float(e.get("time")) for e in events if math.isfinite(_as_float(e.get("time")))), None)
    cells = []
    for e in events:
        if "elided" in e:
            cells.append(f'<span class="gap">… {_plural(_as_float(e["elided"], 0), "token")} '
                         "…</span>")
            continue
        tok = str(e.get("token", e.get("action", "?")))
        hit = e.get("matched") is True
        t = _as_float(e.get("time"))
        when = _clock(t - t0) if t0 is not None and math.isfinite(t) else ""
        gap = _as_float(e.get("pause"))
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


def _detector_card(i, det, groups, show_example=True):
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
    out.append(f"<p>{_when_it_hints(det, direction)}</p>")
    facts = []
    if det.get("priority") is not None:
        facts.append(f"<span>priority <b>{esc(det['priority'])}</b></span>")
    if det.get("favours"):
        facts.append(f"<span>more common among {_group_label(det['favours'], groups)}</span>")
    for key in ("max_gap", "max_window"):
        if det.get(key) is not None:
            facts.append(f"<span>{esc(label_of(key))} <b>{esc(det[key])}</b></span>")
    if facts:
        out.append('<div class="stats">' + "".join(facts) + "</div>")
    if det.get("notes"):
        out.append(f"<p>Notes: {esc(det['notes'], max_chars=2000)}</p>")
    ev = det.get("evidence")
    if isinstance(ev, dict) and ev:
        out.append(_evidence_block(ev, groups))
    if isinstance(det.get("example"), dict) and show_example:
        out.append(_excerpt(det["example"], groups))
    out.append("</article>")
    return "\n".join(out)


def _when_it_hints(det, direction):
    """One sentence: when the watcher delivers this detector's hint by default."""
    if det.get("enabled") is False:
        return "Switched off: the watcher ignores it."
    if direction == "discourage":
        return "Hints when the pattern <b>occurs</b>."
    absence = det.get("absence") if isinstance(det.get("absence"), dict) else {}
    when = []
    if _is_finite(absence.get("after_events")):
        when.append(f"{_int(absence['after_events'])} events")
    if _is_finite(absence.get("after_seconds")):
        when.append(_duration(absence["after_seconds"]))
    if when:
        return ("Hints when the pattern has <b>not occurred</b> after "
                + " or ".join(when) + " of a sequence; completing it is counted, not hinted.")
    return ("Counted when it occurs; no absence rule, so by default it never hints (see "
            "<code>absence</code> in detectors.json).")


def _evidence_block(ev, groups):
    """Per-group supports and rates as a small table, the other evidence as a line."""
    per = {k: ev.get(k) for k in ("n", "support", "rate") if isinstance(ev.get(k), dict)}
    # pause ranges are shown in the token chips themselves
    rest = {k: v for k, v in ev.items() if k not in per and k != "pause_ranges"}
    out = []
    names = _ordered([g for d in per.values() for g in d], groups)
    if names:
        cols = [k for k in ("n", "support", "rate") if k in per]
        rows = []
        for g in names:
            row = [_group_label(g, groups)]
            for k in cols:
                v = per[k].get(g)
                row.append(_int(v) if k == "n" else _pct(v) if k == "support" else _fmt(v, 2))
            rows.append(row)
        out.append(_table(["group"] + [label_of(k) for k in cols], rows,
                          num_cols=tuple(range(1, len(cols) + 1))))
    items = [f"<span>{esc(label)} <b>{_evidence_value(key, v)}</b></span>"
             for label, key, v in _flatten(rest)]
    if items:
        out.append('<div class="stats evidence"><span class="note">evidence:</span>'
                   + "".join(items) + "</div>")
    return "".join(out)


def _flatten(obj, prefix=(), depth=0):
    """(label, last key, value) for every leaf of a nested evidence object."""
    out = []
    for k, v in obj.items():
        path = (*prefix, str(k))
        if isinstance(v, dict) and depth < 2:
            out += _flatten(v, path, depth + 1)
        else:
            if path[0] == "effects" and len(path) == 2:
                label = label_of(path[1])
            else:
                label = label_of(path[0]) + (f" ({', '.join(path[1:])})"
                                             if len(path) > 1 else "")
            out.append((label, "/".join(path), v))
    return out


def _evidence_value(key, v):
    if isinstance(v, bool) or not _is_finite(v):
        if isinstance(v, float) and math.isnan(v) or v is None:
            return "–"
        return esc(v if not isinstance(v, (dict, list)) else json.dumps(v, sort_keys=True))
    head = key.split("/")[0]
    if head.startswith(("p_", "q_")) or "p_value" in key or "q_value" in key:
        return _fmt_p(v)
    if head.startswith(("support", "recall", "replication")) or key.startswith("support_"):
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
            m[idx[a], idx[b]] = _as_float(r["adjusted_residual"])
            if "count" in sub.columns:
                c[idx[a], idx[b]] = _as_float(r["count"])
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
                        "learner_probability", "q_learners") if c in sub.columns]
    rows = []
    for label, part in (("more often", hi), ("less often", lo)):
        for _, r in part.iterrows():
            rows.append([esc(label), f"<span class=\"pair\">{_chip(r['from'])}<span "
                         f"class=\"arrow\">&gt;</span>{_chip(r['to'])}</span>"]
                        + [_transition_cell(c, r[c]) for c in cols])
    if not rows:
        return ""
    heads = ["than expected", "transition"] + [{"probability": "share of next steps",
                                   "learner_probability": "share per learner (mean)",
                                   "q_learners": "q (learners)",
                                   "yules_q": "Yule's Q"}.get(c, c.replace("_", " "))
                                  for c in cols]
    return _table(heads, rows, raw_cells=False, num_cols=tuple(range(2, len(heads))))


def _transition_cell(col, value):
    if col == "count":
        return _fmt(value, 0)
    if col in ("probability", "learner_probability"):
        return _pct(value)
    if col in ("q_learners", "q_pooled"):
        return _fmt_p(value)
    return _fmt(value, 2)


def _state_selection(inp, used=None):
    head = "<h3>Choosing the number of phases</h3>"
    if not inp.ok:
        return head + _missing(inp.note)
    df = inp.value
    cols = [c for c in ("model", "group", "n_states", "bic", "loglik_per_token",
                        "heldout_loglik_per_token", "heldout_loglik") if c in df.columns]
    if "heldout_loglik_per_token" in cols and "heldout_loglik" in cols:
        cols.remove("heldout_loglik")
    marks = [c for c in ("best_bic", "best_heldout", "chosen") if c in df.columns]
    rows = []
    for _, r in df.iterrows():
        row = []
        for c in cols:
            if c in ("model", "group"):
                row.append(esc(r[c]))
            else:
                row.append(_fmt(r[c], 0 if c == "n_states" else
                                4 if c.endswith("per_token") else 1))
        notes = [{"best_bic": "lowest BIC", "best_heldout": "best held-out",
                  "chosen": "chosen"}[c] for c in marks if _true(r[c])]
        if _is_finite(used) and _as_float(r.get("n_states")) == _as_float(used):
            notes.append("used")
        row.append(esc(", ".join(dict.fromkeys(notes))))
        rows.append(row)
    heads = [{"n_states": "phases", "heldout_loglik": "held-out log-likelihood",
              "bic": "BIC", "loglik_per_token": "log-likelihood per token",
              "heldout_loglik_per_token": "held-out log-likelihood per token"}.get(c, c)
             for c in cols] + [""]
    nums = tuple(i for i, c in enumerate(cols) if c not in ("model", "group"))
    return (head + "<p>Each number of phases was fitted and scored: lower BIC and higher "
            "held-out log-likelihood are better. The held-out score comes from learners "
            "left out of the fit, per token so that it compares with the fit's own "
            "score.</p>"
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
    means = {str(ga): [_as_float(first[st]["mean_a"]) for st in states],
             str(gb): [_as_float(first[st]["mean_b"]) for st in states]}
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
        ranked = sorted(by_reason.items(), key=lambda kv: (-_as_float(kv[1], 0.0), str(kv[0])))
        return head + _missing(inp.note) + _reason_table(ranked)
    if not inp.ok:
        return head + _missing(inp.note)
    df = inp.value
    if df.empty:
        return head + "<p>No row was rejected.</p>"
    if "reason" not in df.columns:
        return head + _missing("rejects.csv has no 'reason' column")
    counts = df["reason"].value_counts(sort=False)
    ranked = sorted(counts.items(), key=lambda kv: (-kv[1], str(kv[0])))
    more = (f'<p class="note">{len(ranked) - 10} more reasons in rejects.csv.</p>'
            if len(ranked) > 10 else "")
    return (head + f"<p>{_int(len(df))} rows were set aside; each is listed with its row "
            "number in <code>rejects.csv</code>.</p>" + _reason_table(ranked[:10]) + more)


def _list(value):
    return value if isinstance(value, list) else []


def _reason_table(ranked):
    """Reason code, its meaning (from the loader's list, when known) and the row count."""
    try:
        from ..inputs.load import REJECT_REASONS as meanings
    except ImportError:  # the loader is not part of this build
        meanings = {}
    if not isinstance(meanings, dict):
        meanings = {}
    rows = [[f"<code>{esc(r)}</code>", esc(meanings.get(str(r), "")), _int(n)]
            for r, n in ranked]
    return _table(["reason", "meaning", "rows"], rows, raw_cells=False, num_cols=(2,))


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
    edges = [_as_float(e) for e in _list(pause.get("edges"))]
    labels = [str(x) for x in _list(pause.get("labels"))]
    implicit = {str(x) for x in _list(pause.get("implicit"))}
    if not all(math.isfinite(e) for e in edges) or edges != sorted(edges):
        return head + _missing("pause bin edges in summary.json are not ascending numbers")
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
