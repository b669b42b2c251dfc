"""Small invented output folders for the report tests (demo values, not check values)."""

import json

import numpy as np
import pandas as pd

__all__ = ["HOSTILE", "write_output_folder"]

#: Log-derived strings that must never execute or break the page.
HOSTILE = {
    "script": "<script>document.title='pwned'</script>",
    "quotes": "set_\"light' onmouseover=\"document.title='pwned'",
    "js_url": "javascript:document.title='pwned'",
    "svg_close": "</svg></section><img src=x onerror=\"document.title='pwned'\">",
    "dollar": "$x^2$ & $$ paint_pot",
}


def write_output_folder(folder, *, hostile=False, examples=True, drop=()):
    """Write a complete, invented output folder; ``drop`` lists files to leave out.

    With ``hostile=True`` action names, a group name, a learner id and hint texts are
    replaced by the strings in :data:`HOSTILE`.
    """
    folder.mkdir(parents=True, exist_ok=True)
    h = HOSTILE
    setl = h["quotes"] if hostile else "set_light"
    reset = h["script"] if hostile else "reset"
    paint = h["dollar"] if hostile else "paint_pot"
    guide = h["js_url"] if hostile else "open_guide"
    chart = h["svg_close"] if hostile else "open_chart"
    weak = "weak <b>bold</b>" if hostile else "weak"
    groups = ["strong", weak]
    learner = h["script"] if hostile else "L007"

    summary = {
        "seqmine_version": "0.1.0",
        "seed": 7,
        "groups": groups,
        "counts": {
            "rows_in": 1210, "rows_kept": 1200, "rows_rejected": 10, "learners": 40,
            "learners_per_group": {"strong": 20, weak: 20}, "learners_without_group": 0,
            "sequences": 40, "sequences_per_group": {"strong": 20, weak: 20},
            "patterns_mined": 57, "patterns_significant": 3,
        },
        "gain_by_group": {
            "strong": {"n": 20, "min": 0.31, "q1": 0.45, "median": 0.55, "q3": 0.66, "max": 0.9},
            weak: [0.0, 0.05, 0.1, 0.12, 0.2, 0.22, 0.25, 0.3],
        },
        "sequence_lengths": {"strong": {"n": 20, "min": 12, "q1": 22, "median": 30, "q3": 36,
                                        "max": 51},
                             weak: {"n": 20, "min": 8, "q1": 18, "median": 26, "q3": 33,
                                    "max": 60}},
        "encoding": {"unit": "learner", "pause": {"strategy": "quantile",
                                                  "edges": [4.0, 20.0],
                                                  "labels": ["short", "medium", "long"],
                                                  "implicit": ["short"]}},
        "method": {"grouping": "median split on normalized gain",
                   "presence_test": "Fisher's exact test (two-sided)",
                   "rate_test": "Mann-Whitney U", "correction": "bh", "alpha": 0.05,
                   "min_support": 0.2, "max_length": 4, "max_gap": 2, "cv_folds": 5},
        "pseudonymized": False,
        "config": {"mine": {"min_support": 0.2}, "note": reset},
        "versions": {"seqmine": "0.1.0", "numpy": "2.x"},
    }
    files = {}
    files["summary.json"] = json.dumps(summary, indent=2)
    files["rejects.csv"] = pd.DataFrame({
        "source_row": list(range(2, 12)),
        "reason": ["unparseable time"] * 6 + ["empty action"] * 3 + [f"bad {reset}"]},
    ).to_csv(index=False)
    pats = [
        (f"{setl} > advance_week > measure_height > pause:long", 0.70, 0.20, "strong"),
        (f"{setl} > set_water > set_temperature > advance_week", 0.15, 0.60, weak),
        (f"advance_week > {reset}", 0.10, 0.45, weak),
        (f"{paint} > {paint}", 0.05, 0.25, ""),
        (f"{guide} > {chart}", 0.40, 0.35, ""),
        ("NA > null", 0.30, 0.30, ""),
    ]
    rows = []
    for k, (pat, s1, s2, fav) in enumerate(pats):
        rows.append({"pattern": pat, "length": pat.count(" > ") + 1, "support_strong": s1,
                     f"support_{weak}": s2, "p_value": [1e-5, 4e-4, 0.003, 0.04, 0.6, 1.0][k],
                     "q_value": [3e-4, 0.006, 0.03, 0.2, 0.9, 1.0][k], "favours": fav,
                     "risk_difference": s1 - s2, "odds_ratio": (s1 / (1 - s1)) / (s2 / (1 - s2)),
                     "cohens_h": 2 * np.arcsin(np.sqrt(s1)) - 2 * np.arcsin(np.sqrt(s2)),
                     "cliffs_delta": (s1 - s2) / 1.5, "stability": [0.95, 0.8, 0.6, 0.3, 0.1,
                                                                    0.0][k]})
    files["patterns.csv"] = pd.DataFrame(rows).to_csv(index=False)
    toks = [setl, "advance_week", "measure_height", reset, "pause:long", paint]
    rng = np.random.default_rng(3)
    trs = []
    for g in groups:
        for a in toks:
            for b in toks:
                c = int(rng.integers(0, 30))
                trs.append({"group": g, "from": a, "to": b, "count": c,
                            "expected": 10.0, "adjusted_residual": round((c - 10) / 3.0, 3),
                            "yules_q": round((c - 10) / 30.0, 3)})
    files["transitions.csv"] = pd.DataFrame(trs).to_csv(index=False)
    files["early_prediction.csv"] = pd.DataFrame([
        {"classifier": clf, "fraction": f, "accuracy": acc, "balanced_accuracy": acc - 0.02,
         "recall_strong": acc + 0.03, f"recall_{weak}": acc - 0.07, "roc_auc": acc + 0.05,
         "accuracy_ci_low": acc - 0.1, "accuracy_ci_high": acc + 0.1,
         "balanced_accuracy_ci_low": acc - 0.12, "balanced_accuracy_ci_high": acc + 0.08,
         "baseline": 0.5}
        for clf, base in (("patterns", 0.55), ("frequency and pauses", 0.52))
        for f, acc in ((0.25, base), (0.5, base + 0.1), (0.75, base + 0.15), (1.0, base + 0.2))
    ]).to_csv(index=False)
    files["detectors.json"] = json.dumps({"format": "seqmine-detectors", "version": 1,
                                          "detectors": [
        {"id": "d1", "pattern": [setl, "advance_week", "measure_height"],
         "direction": "encourage", "priority": 2,
         "hint": "Nice: you changed one setting, then measured." if not hostile else h["script"],
         "evidence": {"q_value": 3e-4, "support_strong": 0.7, f"support_{weak}": 0.2,
                      "stability": 0.95}},
        {"id": "d2" if not hostile else h["quotes"], "pattern": f"advance_week > {reset}",
         "direction": "discourage", "priority": 1,
         "hint": "Try measuring before you reset." if not hostile else h["svg_close"],
         "evidence": {"q_value": 0.03, "odds_ratio": 0.14}},
    ]}, indent=2)
    if examples:
        files["examples.json"] = json.dumps({"patterns": {
            pats[0][0]: [{"learner": learner, "group": "strong", "events": [
                {"time": 100.0, "token": "open_guide", "matched": False},
                {"time": 104.0, "token": setl, "matched": True},
                {"time": 109.5, "token": "advance_week", "matched": True},
                {"time": 113.0, "token": "measure_height", "matched": True, "pause": 42.0},
                {"time": 113.0, "token": "pause:long", "matched": True},
                {"time": 155.0, "token": reset, "matched": False}]}],
            pats[2][0]: [{"learner": "L012", "group": weak, "events": [
                {"time": 5.0, "action": "advance_week", "matched": True},
                {"time": 6.0, "action": reset, "matched": True}]}],
        }}, indent=2)
    pdir = folder / "phases"
    pdir.mkdir(exist_ok=True)
    for g in ["pooled", *groups]:
        model = {"group": g, "n_states": 3, "states": [
            {"name": "set up", "emissions": [[setl, 0.5], ["add_seedling", 0.3], [reset, 0.1]],
             "dwell": 2.5},
            {"name": "run and measure", "emissions": {"advance_week": 0.4,
                                                      "measure_height": 0.35}, "dwell": 4.0},
            {"name": "tinker", "emissions": [{"token": paint, "prob": 0.6},
                                             {"token": guide, "prob": 0.2}], "dwell": 1.5}],
            "transmat": [[0.6, 0.3, 0.1], [0.15, 0.75, 0.1], [0.3, 0.03, 0.67]],
            "startprob": [0.8, 0.1, 0.1]}
        safe = "weak" if g == weak else g
        files[f"phases/model_{safe}.json"] = json.dumps(model, indent=2)
    files["phases/state_selection.csv"] = pd.DataFrame([
        {"group": g, "n_states": k, "bic": 5000 - 300 * k + 40 * k * k,
         "heldout_loglik": -1.9 + 0.1 * k - 0.01 * k * k, "chosen": k == 3}
        for g in ["pooled"] for k in (2, 3, 4)]).to_csv(index=False)
    files["phases/occupancy.csv"] = pd.DataFrame([
        {"state": s, "group": g, "occupancy": o, "p_value": p, "q_value": p * 2}
        for s, o1, o2, p in (("set up", 0.3, 0.35, 0.4), ("run and measure", 0.55, 0.3, 0.001),
                             ("tinker", 0.15, 0.35, 0.01))
        for g, o in (("strong", o1), (weak, o2))]).to_csv(index=False)
    files["phases/model_pooled.graphml"] = "<graphml/>"
    for name, text in files.items():
        if name in drop:
            continue
        (folder / name).write_text(text, encoding="utf-8")
    return folder
