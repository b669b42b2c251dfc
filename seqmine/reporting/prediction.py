"""The early-prediction section of the report and its line on the first screen.

Reads ``early_prediction.csv`` (one row per classifier x observed share: the mean over
the repetitions of the cross-validation, bootstrap bounds ``<metric>_low/_high``,
the range over repetitions ``<metric>_min/_max``, the majority baseline and the test
against it) and the ``early_prediction`` and ``grouping`` entries of ``summary.json``.
Tables from older runs without repetitions are read too (the range is then left out).
"""

from __future__ import annotations

import math

import numpy as np

from . import plots as _plots
from .evidence import activity_differs
from .html import (
    _describe_grouping,
    _fmt,
    _fmt_p,
    _h2,
    _int,
    _missing,
    _as_float,
    _pct,
    _plural,
    _section,
    _table,
    _true,
    esc,
    label_of,
)

__all__ = ["section_prediction", "prediction_glance", "classifier_label", "CLASSIFIER_LABELS"]

#: Readable names of the classifiers compared in early_prediction.csv.
CLASSIFIER_LABELS = {
    "pattern": "patterns",
    "hmm": "phase models",
    "frequency_pause": "action frequencies and pauses",
    "fusion": "all three combined",
    "majority": "majority baseline",
}


def classifier_label(name):
    """Readable name of a classifier (unknown names are shown as they are).

    Examples
    --------
    >>> classifier_label("frequency_pause"), classifier_label("my_model")
    ('action frequencies and pauses', 'my_model')
    """
    return CLASSIFIER_LABELS.get(str(name), str(name))


def prediction_glance(d):
    """First-screen line: did any classifier beat the majority baseline, from when?"""
    df = _table_of(d)
    if df is None or "balanced_accuracy" not in df.columns:
        return []
    sub = df[df["classifier"] != "majority"]
    sub = sub[np.isfinite(sub["balanced_accuracy"]) & np.isfinite(sub["fraction"])]
    if sub.empty:
        return []
    design = _design_words(d, df)
    if "beats_baseline" not in sub.columns:
        early = sub[sub["fraction"] == sub["fraction"].min()]
        best = early.sort_values("balanced_accuracy", ascending=False, kind="mergesort").iloc[0]
        return [f"After {_pct(best['fraction'])} of a sequence the best classifier "
                f"({esc(classifier_label(best['classifier']))}) reaches a balanced accuracy "
                f"of {_fmt(best['balanced_accuracy'], 2)} (chance 0.5); whether it beats the "
                "majority baseline was not recorded."]
    hits = sub[sub["beats_baseline"].map(_true)]
    shares = ", ".join(_pct(f) for f in sorted(set(sub["fraction"])))
    if hits.empty:
        best = sub.sort_values(["balanced_accuracy", "fraction"], ascending=[False, True],
                               kind="mergesort").iloc[0]
        return [f'<span class="glance-no">No classifier beat the majority baseline</span> at '
                f"any observed share of the sequence ({shares}; {design}). The best balanced "
                f"accuracy was {_fmt(best['balanced_accuracy'], 2)} "
                f"({esc(classifier_label(best['classifier']))}, {_pct(best['fraction'])} "
                "observed), which is not reliably better than always guessing the larger "
                "group."]
    first = hits["fraction"].min()
    at = hits[hits["fraction"] == first].sort_values("balanced_accuracy", ascending=False,
                                                      kind="mergesort")
    best = at.iloc[0]
    others = [classifier_label(n) for n in at["classifier"].iloc[1:]]
    spread = _range_words(best, "balanced_accuracy")
    base = (f"; majority baseline accuracy {_fmt(best['baseline_accuracy'], 2)}"
            if "baseline_accuracy" in best.index and math.isfinite(_as_float(
                best["baseline_accuracy"])) else "")
    also = (f" ({'also ' + ', '.join(esc(o) for o in others)})" if others else "")
    label = esc(classifier_label(best["classifier"]))
    return [f"Early recognition: the classifier on <b>{label}</b> "
            f"beat the majority baseline from <b>{_pct(first)}</b> of the sequence "
            f"on{also}, with a balanced accuracy of {_fmt(best['balanced_accuracy'], 2)}"
            f"{spread}{base} ({design}).{_activity_caveat(d)}"]


def _activity_caveat(d):
    """A sentence when the groups differ in how much they did: the features are shares
    and rates per token, not counts, but longer work still shapes them."""
    if not activity_differs(d["summary"].value if "summary" in d else None):
        return ""
    return (" The groups also differ in how much they did. The classifiers use shares and "
            "rates per token, not counts, but how long a learner works can still shape "
            "them, so read this accuracy beside the activity difference.")


def section_prediction(d, figs):
    """Early prediction curves against the majority baseline, the rule for the groups,
    the repetitions and every value."""
    out = [_h2("early-prediction"),
           "<p>Classifiers were trained on some learners and tested on others, seeing only "
           "the first part of each test sequence; every step that learns from the logs "
           "(pause bins, patterns, phase models) was fitted on the training learners only. "
           "<b>Balanced accuracy</b> averages the share recognised in each group, so 0.5 is "
           "chance whatever the group sizes. The dashed line is the <b>majority "
           "baseline</b>: always guessing the larger group. Shaded bands are bootstrap "
           "confidence intervals over the held-out learners.</p>"]
    df = _table_of(d)
    inp = d["early_prediction"]
    if not inp.ok:
        return _section("early-prediction", out + [_missing(inp.note)])
    metrics = [m for m in ("balanced_accuracy", "accuracy") if m in df.columns]
    if "fraction" not in df.columns or not metrics:
        return _section("early-prediction", out + [_missing(
            "early_prediction.csv needs 'fraction' and 'accuracy' or 'balanced_accuracy'")])
    out.append(_design_paragraph(d, df))
    names = list(dict.fromkeys(df["classifier"]))
    shown = [n for n in names if n != "majority"] or names
    base_col = next((c for c in ("baseline_accuracy", "baseline") if c in df.columns), None)
    charts = []
    for metric in metrics:
        curves = {}
        for name in shown:
            sub = df[df["classifier"] == name]
            lo, hi = _bounds(sub, metric)
            curves[classifier_label(name)] = {"fraction": sub["fraction"], "value": sub[metric],
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
        label = label_of(metric)
        charts.append("<div>" + _plots.svg_prediction_curves(
            curves, fig_id=figs(), baseline=baseline, chance=chance, ylabel=label,
            title=f"{label.capitalize()} by share of sequence observed") + "</div>")
    out.append('<div class="grid2">' + "".join(charts) + "</div>")
    out.append(_earliest(df, shown))
    out.append("<details><summary>All values</summary>" + _all_values(df, base_col)
               + "</details>")
    return _section("early-prediction", out)


# --------------------------------------------------------------------------- helpers


def _table_of(d):
    inp = d["early_prediction"]
    if not inp.ok:
        return None
    df = inp.value
    if "classifier" not in df.columns:
        df = df.assign(classifier="classifier")
    df = df.assign(classifier=df["classifier"].astype(str))
    if "fraction" not in df.columns:
        return df
    rank = {n: i for i, n in enumerate(dict.fromkeys(df["classifier"]))}
    return (df.assign(_r=df["classifier"].map(rank))
            .sort_values(["_r", "fraction"], kind="mergesort").drop(columns="_r"))


def _record(d):
    ep = (d["summary"].value or {}).get("early_prediction")
    return ep if isinstance(ep, dict) else {}


def _repeats(d, df):
    rec = _record(d)
    r = _as_float(rec.get("n_repeats"))
    if not math.isfinite(r) and "n_repeats" in df.columns:
        r = _as_float(df["n_repeats"].max())
    return int(r) if math.isfinite(r) else None


def _design_words(d, df):
    """'5 folds x 3 repetitions' (or what is known of it)."""
    rec = _record(d)
    folds = _as_float(rec.get("n_splits"))
    if not math.isfinite(folds):
        method = (d["summary"].value or {}).get("method")
        folds = _as_float(method.get("n_splits") if isinstance(method, dict) else None)
    reps = _repeats(d, df)
    parts = []
    if math.isfinite(folds):
        parts.append(f"{int(folds)}-fold cross-validation")
    if reps:
        parts.append(_plural(reps, "repetition"))
    return " × ".join(parts) if parts else "learner-level cross-validation"


def _design_paragraph(d, df):
    summary = d["summary"].value or {}
    rec = _record(d)
    out = []
    grouping = summary.get("grouping")
    scored = rec.get("learners_scored")
    n = _as_float(scored) if scored is not None else (
        _as_float(df["n_learners"].max()) if "n_learners" in df.columns else math.nan)
    if rec.get("groups_fixed_once"):
        rule = f" by the rule: {_describe_grouping(grouping)}" if grouping is not None else ""
        who = (f"all {_int(n)} learners with a group" if math.isfinite(n)
               else "every learner with a group")
        out.append(f"<b>Groups fixed once.</b> The outcome groups are what is predicted, not "
                   f"something learnt from the logs: they were decided once from the outcome "
                   f"table{rule}. The same groups were kept in every fold, so {who} were "
                   "scored.")
    reps = _repeats(d, df)
    if reps and reps > 1:
        hmm = _as_float(rec.get("n_repeats_hmm"))
        fewer = ""
        if "n_repeats" in df.columns:
            less = sorted({classifier_label(c) for c, r in zip(df["classifier"], df["n_repeats"])
                           if _as_float(r) < reps})
            if less:
                k = int(hmm) if math.isfinite(hmm) else int(df["n_repeats"].min())
                names = " and ".join(f"<i>{esc(x)}</i>" for x in less)
                fewer = (f" Run in {_plural(k, 'repetition')} only: {names} (fitting phase "
                         "models in every fold costs most; raise "
                         "<code>validate.n_repeats_hmm</code> for more).")
        out.append(f"<b>Repeated cross-validation.</b> The learners were dealt into folds "
                   f"{reps} times with fresh shuffles ({esc(_design_words(d, df))}). Each value "
                   "is the mean over the repetitions; <i>range</i> gives the lowest and "
                   "highest, showing how much the result depends on which learners "
                   f"happened to share a fold.{fewer}")
    return "".join(f"<p>{p}</p>" for p in out)


def _bounds(sub, metric):
    for lo, hi in ((f"{metric}_low", f"{metric}_high"),
                   (f"{metric}_ci_low", f"{metric}_ci_high")):
        if lo in sub.columns and hi in sub.columns and sub[[lo, hi]].notna().all().all():
            return sub[lo], sub[hi]
    return None, None


def _range_words(row, metric):
    lo, hi = _as_float(row.get(f"{metric}_min")), _as_float(row.get(f"{metric}_max"))
    reps = _as_float(row.get("n_repeats"))
    if math.isfinite(lo) and math.isfinite(hi) and math.isfinite(reps) and reps > 1:
        return f" (range {_fmt(lo, 2)}–{_fmt(hi, 2)} over {int(reps)} repetitions)"
    return ""


def _earliest(df, names):
    """Earliest fraction at which each classifier is reliably better than the baseline."""
    if "beats_baseline" in df.columns:
        rule = ("the classifier was right for significantly more held-out learners than "
                "the majority baseline (one-sided sign test on each learner's share of "
                "correct predictions over the repetitions)")
        hit = df["beats_baseline"].map(_true)
    elif "balanced_accuracy" in df.columns and _bounds(df, "balanced_accuracy")[0] is not None:
        rule = "the lower confidence bound of balanced accuracy is above chance"
        hit = _bounds(df, "balanced_accuracy")[0] > 0.5
    else:
        return ""
    parts = []
    for name in names:
        sel = (df["classifier"] == name) & hit
        label = esc(classifier_label(name))
        if sel.any():
            parts.append(f"<li>{label}: from {_pct(df.loc[sel, 'fraction'].min())} of "
                         "the sequence.</li>")
        else:
            parts.append(f"<li>{label}: not at any observed share.</li>")
    return (f"<p>Earliest reliable recognition (first share of the sequence at which {rule}):"
            "</p><ul>" + "".join(parts) + "</ul>")


def _all_values(df, base_col):
    recall = [c for c in df.columns if c.startswith("recall_")
              and not c.endswith(("_low", "_high", "_min", "_max"))]
    metrics = [c for c in ("accuracy", "balanced_accuracy", *recall, "roc_auc")
               if c in df.columns]
    ranged = {c for c in metrics if f"{c}_min" in df.columns and f"{c}_max" in df.columns}
    ranged &= {"balanced_accuracy"}
    cols = [("classifier", lambda r: esc(classifier_label(r["classifier"]))),
            (label_of("fraction"), lambda r: _pct(r["fraction"]))]
    cols += [(label_of(c), lambda r, c=c: _int(r[c]))
             for c in ("n_repeats", "n_learners") if c in df.columns]
    for c in metrics:
        cols.append((label_of(c), lambda r, c=c: _fmt(r[c], 2)))
        if c in ranged:
            cols.append((f"{label_of(c)} range", lambda r, c=c:
                         f"{_fmt(r[f'{c}_min'], 2)}–{_fmt(r[f'{c}_max'], 2)}"))
    if base_col is not None:
        cols.append((label_of(base_col), lambda r: _fmt(r[base_col], 2)))
    if "p_value" in df.columns:
        cols.append(("p (vs baseline)", lambda r: _fmt_p(r["p_value"])))
    if "beats_baseline" in df.columns:
        cols.append((label_of("beats_baseline"),
                     lambda r: "✓" if _true(r["beats_baseline"]) else ""))
    rows = [[cell(r) for _, cell in cols] for _, r in df.iterrows()]
    return _table([h for h, _ in cols], rows, raw_cells=False,
                  num_cols=tuple(range(1, len(cols))))
