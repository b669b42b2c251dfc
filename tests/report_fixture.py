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

    summary = {  # flat layout, as the pipeline writes it
        "seed": 7,
        "group_names": groups,
        "rows_in": 1210, "rows_kept": 1200, "rows_rejected": 10, "learners": 40,
        "rejects_by_reason": {"unparseable time": 6, "empty action": 3, f"bad {reset}": 1},
        "learners_per_group": {"strong": 20, weak: 20}, "learners_without_group": 0,
        "sequences": 40, "sequences_per_group": {"strong": 20, weak: 20},
        "patterns_mined": 57, "patterns_significant": 3,
        "gain_by_group": {
            "strong": {"n": 20, "mean": 0.56, "min": 0.31, "q1": 0.45, "median": 0.55,
                       "q3": 0.66, "max": 0.9},
            weak: [0.0, 0.05, 0.1, 0.12, 0.2, 0.22, 0.25, 0.3],
        },
        "sequence_lengths": {"strong": {"n": 20, "min": 12, "q1": 22, "median": 30, "q3": 36,
                                        "max": 51},
                             weak: {"n": 20, "min": 8, "q1": 18, "median": 26, "q3": 33,
                                    "max": 60}},
        "pause_edges_seconds": [4.0, 20.0], "pause_labels": ["short", "medium", "long"],
        "encoding": {"unit": "learner", "pause": {"strategy": "quantile",
                                                  "implicit": ["short"]}},
        "grouping": {"rule": "median", "cut": 0.31},
        "method": {"presence_test": "Fisher's exact test (two-sided)",
                   "rate_test": "Mann-Whitney U"},
        "pseudonymized": False,
        "configuration": {"mine": {"min_support": 0.2, "max_length": 4, "max_gap": 1},
                          "contrast": {"correction": "bh", "alpha": 0.05,
                                       "n_permutations": 1000, "n_bootstrap": 100},
                          "validate": {"n_splits": 5}, "note": reset},
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
                                                                    0.0][k],
                     "redundant_of": ""})
    rows.append(dict(rows[0], pattern=pats[0][0].rsplit(" > ", 1)[0], length=3,
                     redundant_of=pats[0][0]))
    files["patterns.csv"] = pd.DataFrame(rows).to_csv(index=False)
    files["tokens.csv"] = pd.DataFrame({
        "pattern": [reset, paint, "pause:long", setl],
        "length": 1, "kind": ["action", "action", "pause", "action"],
        "support_strong": [0.2, 0.3, 0.9, 1.0], f"support_{weak}": [0.6, 0.7, 0.8, 1.0],
        "rate_strong": [0.4, 0.9, 6.0, 3.0], f"rate_{weak}": [1.6, 2.9, 5.1, 2.8],
        "p_value": [1e-4, 2e-4, 0.3, 1.0], "q_value": [4e-4, 4e-4, 0.4, 1.0],
        "q_volume": [5e-4, 6e-4, 0.5, 1.0], "evidence": ["presence", "presence", "", ""],
        "favours": [weak, weak, "", ""], "q_rate": [1e-5, 3e-5, 0.2, 0.7],
    }).to_csv(index=False)
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
    pred = []
    for clf, base in (("pattern", 0.55), ("frequency_pause", 0.52), ("majority", 0.5)):
        for f, up in ((0.25, 0.0), (0.5, 0.1), (0.75, 0.15), (1.0, 0.2)):
            acc = base if clf == "majority" else base + up
            row = {"classifier": clf, "fraction": f, "n_learners": 40}
            for m, v in (("accuracy", acc), ("balanced_accuracy", acc - 0.02),
                         ("recall_strong", acc + 0.03), (f"recall_{weak}", acc - 0.07),
                         ("roc_auc", acc + 0.05)):
                row.update({m: v, f"{m}_low": v - 0.1, f"{m}_high": v + 0.08})
            row.update(baseline_accuracy=0.5, n_only_classifier_right=3,
                       n_only_baseline_right=1, p_value=0.3,
                       beats_baseline=clf != "majority" and acc >= 0.65)
            pred.append(row)
    files["early_prediction.csv"] = pd.DataFrame(pred).to_csv(index=False)
    files["detectors.json"] = json.dumps({
        "format": "seqmine-detectors", "version": 1,
        "notice": "Detectors come from correlational findings; pilot them first.",
        "matching": {"max_gap": 1, "max_window": None, "skip_pauses": False},
        "groups": {"names": groups, "strong": "strong", "weak": weak},
        "detectors": [
            {"id": "D002" if not hostile else h["quotes"], "tokens": ["advance_week", reset],
             "direction": "discourage", "favours": weak, "priority": 2, "enabled": True,
             "hint": "Try measuring before you reset." if not hostile else h["svg_close"],
             "absence": None,
             "evidence": {"support": {"strong": 0.1, weak: 0.45}, "n": {"strong": 20, weak: 20},
                          "p_value": 0.003, "q_value": 0.03, "effects": {"odds_ratio": 0.14},
                          "stability": 0.6}},
            {"id": "D001", "tokens": [setl, "advance_week", "measure_height"],
             "direction": "encourage", "favours": "strong", "priority": 1, "enabled": True,
             "hint": ("Nice: you changed one setting, then measured." if not hostile
                      else h["script"]),
             "absence": {"after_events": 30, "after_seconds": None},
             "notes": "reviewed with the science team" if not hostile else h["js_url"],
             "evidence": {"support": {"strong": 0.7, weak: 0.2}, "n": {"strong": 20, weak: 20},
                          "p_value": 1e-5, "q_value": 3e-4,
                          "effects": {"risk_difference": 0.5, "odds_ratio": 9.33},
                          "stability": 0.95}},
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
    vocab = [setl, "add_seedling", reset, "advance_week", "measure_height", paint, guide]
    emis = [[0.5, 0.3, 0.1, 0.05, 0.05, 0.0, 0.0],
            [0.05, 0.0, 0.05, 0.4, 0.35, 0.1, 0.05],
            [0.0, 0.1, 0.05, 0.05, 0.0, 0.6, 0.2]]
    keys = {"pooled": "model_pooled", "strong": "model_group-strong",
            weak: "model_group-weak"}
    for g, stem in keys.items():
        files[f"phases/{stem}.json"] = json.dumps({
            "format": "seqmine-phases", "version": 1, "label": g, "vocab": vocab,
            "startprob": [0.8, 0.1, 0.1],
            "transmat": [[0.6, 0.3, 0.1], [0.15, 0.75, 0.1], [0.3, 0.03, 0.67]],
            "emissionprob": emis, "state_labels": ["S1", "S2", "S3"],
            "state_names": [f"{setl}/add_seedling", "advance_week/measure_height", paint]},
            indent=1)
        files[f"phases/graph_{stem[6:]}.graphml"] = "<graphml/>"
    files["phases/phases.json"] = json.dumps({"format": "seqmine-phases", "version": 1,
                                              "n_states": 3, "criterion": "bic",
                                              "models": keys})
    files["phases/state_selection.csv"] = pd.DataFrame([
        {"model": "pooled", "n_states": k, "n_parameters": 10 * k, "n_observations": 1200,
         "log_likelihood": -2000 + 50 * k, "bic": 5000 - 300 * k + 40 * k * k,
         "heldout_loglik": -900 + 30 * k - 3 * k * k, "heldout_loglik_per_token": -1.5,
         "best_bic": k == 4, "best_heldout": k == 5}
        for k in (2, 3, 4, 5)]).to_csv(index=False)
    occ = []
    for st, name, a, b, q in (("S1", f"{setl}/add_seedling", 0.3, 0.35, 0.8),
                              ("S2", "advance_week/measure_height", 0.55, 0.3, 0.002),
                              ("S3", paint, 0.15, 0.35, 0.02)):
        for measure, va, vb in (("occupancy", a, b), ("mean_dwell", 3.0, 2.0)):
            occ.append({"measure": measure, "state": st, "to_state": "", "state_name": name,
                        "to_state_name": "", "group_a": "strong", "group_b": weak,
                        "n_a": 20, "n_b": 20, "mean_a": va, "mean_b": vb, "median_a": va,
                        "median_b": vb, "u_statistic": 150.0, "cliffs_delta": (va - vb),
                        "p_value": q / 2, "q_value": q,
                        "favours": ("strong" if va > vb else weak) if q < 0.05 else ""})
    files["phases/occupancy_comparison.csv"] = pd.DataFrame(occ).to_csv(index=False)
    for name, text in files.items():
        if name in drop:
            continue
        (folder / name).write_text(text, encoding="utf-8")
    return folder
