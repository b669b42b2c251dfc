"""Time the learner-level cross-validation on the shipped greenhouse demo data.

Run from the repository root::

    python benchmarks/bench_validate.py [--folds K] [--jobs N]

Prints the run time (serial and with --jobs), the CPU seconds of one split against the
default repeated split (measured side by side, with the load average), and the
early-prediction curve of each classifier at 25 %, 50 % and 100 % of the session, and
writes them to ``benchmarks/results/validate.json``.
"""

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

from seqmine.inputs.load import load_events
from seqmine.inputs.outcomes import load_outcomes
from seqmine.config import DEFAULT_CONFIG
from seqmine.validation.crossval import validate

ROOT = Path(__file__).resolve().parents[1]


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--splits", type=int, default=5)
    p.add_argument("--jobs", type=int, default=2)
    p.add_argument("--fractions", default="0.1,0.25,0.5,0.75,1")
    args = p.parse_args()
    data = ROOT / "datasets" / "greenhouse"
    events = load_events(data / "events.csv").events
    outcomes = load_outcomes(data / "outcomes.csv")
    fractions = [float(x) for x in args.fractions.split(",")]
    timings = {}
    results = {}
    for jobs in sorted({1, args.jobs}):
        t0 = time.perf_counter()
        results[jobs] = validate(events, outcomes, n_splits=args.splits, fractions=fractions,
                                 n_jobs=jobs, random_state=0)
        timings[jobs] = time.perf_counter() - t0
    r = results[1]
    same = all(results[j].to_frame().equals(r.to_frame()) for j in results)
    # the cost of the repetitions: one split against the default, CPU seconds of this
    # process (the serial path), each run twice in alternation
    va = DEFAULT_CONFIG["validate"]
    settings = {"one split": (1, 1), "default": (va["n_repeats"], va["n_repeats_hmm"])}
    cpu = {k: [] for k in settings}
    for _ in range(2):
        for name, (rep, rep_hmm) in settings.items():
            t0 = time.process_time()
            validate(events, outcomes, n_splits=args.splits, fractions=fractions, n_jobs=1,
                     random_state=0, n_repeats=rep, n_repeats_hmm=rep_hmm)
            cpu[name].append(time.process_time() - t0)
    repeats = {
        "settings": {k: {"n_repeats": v[0], "n_repeats_hmm": v[1]} for k, v in settings.items()},
        "cpu_seconds": {k: round(min(v), 2) for k, v in cpu.items()},
        "ratio_default_to_one_split": round(min(cpu["default"]) / min(cpu["one split"]), 2),
        "load_average": [round(x, 2) for x in os.getloadavg()],
    }
    table = r.to_frame()
    curve = {}
    for name, part in table.groupby("classifier", sort=False):
        curve[name] = {f"{row.fraction:g}": {
            "accuracy": round(row.accuracy, 3),
            "accuracy_ci": [round(row.accuracy_low, 3), round(row.accuracy_high, 3)],
            "balanced_accuracy": round(row.balanced_accuracy, 3),
            "roc_auc": round(row.roc_auc, 3),
            "beats_baseline": bool(row.beats_baseline)}
            for row in part.itertuples() if row.fraction in (0.25, 0.5, 1.0)}
    out = {
        "learners": int(r.settings["n_learners"]), "events": int(len(events)),
        "folds": args.splits, "fractions": fractions,
        "seconds": {f"jobs={j}": round(t, 2) for j, t in timings.items()},
        "parallel_identical_to_serial": bool(same),
        "repetitions": repeats,
        "earliest_fraction": {k: (None if np.isnan(v) else v)
                              for k, v in r.earliest_fraction().items()},
        "curve": curve,
    }
    print(json.dumps(out, indent=1))
    dest = ROOT / "benchmarks" / "results"
    dest.mkdir(parents=True, exist_ok=True)
    (dest / "validate.json").write_text(json.dumps(out, indent=1) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
