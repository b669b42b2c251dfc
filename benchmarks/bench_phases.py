"""Benchmark of the phases stage: CPU seconds on a seven-week course log and on the demo.

Run from the repository root::

    python benchmarks/bench_phases.py              # course log + demo data
    python benchmarks/bench_phases.py --quick      # a 20,000-event course log (smoke test)
    python benchmarks/bench_phases.py --reference  # also hmmlearn's best of five fits on
                                                   # the course log (slow: minutes)

Writes ``benchmarks/results/phases.json``. Figures are CPU seconds of this process and
its children (``resource.getrusage``), which other work on the machine inflates less
than wall time; the 1-minute load average before and after each run is recorded beside
them. The data:

* the generated course log of ``_course_log.py`` (95,626 events, 130 learners, seven
  weeks, 1-second clock) encoded with the defaults (a sequence per session: a gap of
  more than 30 minutes starts a new one), and with one sequence per learner;
* the shipped demo data set (300 learners).

Per data set: the whole phases stage with the defaults (``fit_phases``: 2-5 states, 3
starts, one held-out fold), and the early-prediction featurizer's HMM fit on the
training learners of one fold (four fifths of the learners), the cost that every
cross-validation fold pays.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from _course_log import write_course_log  # noqa: E402

from seqmine._util.progress import quiet_mode  # noqa: E402
from seqmine.config import default_config  # noqa: E402
from seqmine.encoding.encoder import encoder_from_settings  # noqa: E402
from seqmine.inputs.load import load_events  # noqa: E402
from seqmine.inputs.outcomes import Grouping, load_outcomes  # noqa: E402
from seqmine.phases import fit_phases  # noqa: E402
from seqmine.pipeline import prepare_sequences  # noqa: E402
from seqmine.validation.features import HMMLikelihoodFeaturizer  # noqa: E402

DATA = HERE / ".data"
DEMO = HERE.parent / "datasets" / "greenhouse"


def cpu_seconds():
    """CPU time (user + system) of this process and its finished children."""
    total = 0.0
    for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN):
        r = resource.getrusage(who)
        total += r.ru_utime + r.ru_stime
    return total


def measured(fn):
    """``fn()``, CPU seconds, wall seconds and the load average before and after."""
    load0 = os.getloadavg()[0]
    c0, w0 = cpu_seconds(), time.perf_counter()
    out = fn()
    return out, {"cpu_s": round(cpu_seconds() - c0, 3),
                 "wall_s": round(time.perf_counter() - w0, 3),
                 "load_avg": [round(load0, 2), round(os.getloadavg()[0], 2)]}


def encode(events, outcomes, **settings):
    """The SequenceDB ``analyze`` would build (default encoding unless ``settings``
    override it; median split)."""
    settings = {**default_config()["encode"], **settings}
    with warnings.catch_warnings():      # rows of one second rejected as duplicates
        warnings.simplefilter("ignore")
        loaded = load_events(events)
    prepared = prepare_sequences(loaded, load_outcomes(outcomes),
                                 encoder=encoder_from_settings(settings),
                                 grouping=Grouping("median"))
    return prepared.db


def one_fold(db, seed=0):
    """The grouped sequences of four fifths of the learners (one cross-validation
    fold's training data)."""
    db = db.subset(np.flatnonzero(db.groups >= 0))
    learners = np.unique(db.learners)
    rng = np.random.default_rng(seed)
    train = set(rng.choice(learners, int(0.8 * len(learners)), replace=False).tolist())
    return db.subset(np.flatnonzero([lr in train for lr in db.learners]))


def bench_db(name, db, reference=False):
    seed = default_config()["seed"]
    print(f"{name}: {db.n_sequences} sequences, {db.n_tokens} tokens, longest "
          f"{int(db.lengths.max())}", flush=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res, m = measured(lambda: fit_phases(db))
    sel = res.selection
    row = {"tokens": int(db.n_tokens), "sequences": int(db.n_sequences), "seconds": m["cpu_s"],
           **m, "chosen_states": int(res.n_states),
           "log_likelihood": {int(r.n_states): float(r.log_likelihood)
                              for r in sel.itertuples()},
           "em_steps": {int(r.n_states): int(r.n_iter) for r in sel.itertuples()},
           "warnings": sorted({str(getattr(w.message, "code", w.message)) for w in caught}),
           "settings": "defaults: states 2-5, 3 starts, one held-out fold of 3"}
    print(f"  fit_phases (defaults): {m['cpu_s']:.2f} CPU-s, {m['wall_s']:.2f} s wall, "
          f"load {m['load_avg']}; chose {res.n_states} states", flush=True)
    fold = one_fold(db)
    feat, m2 = measured(lambda: HMMLikelihoodFeaturizer(random_state=seed).fit(fold))
    part = db.cut(0.5)
    _, m3 = measured(lambda: feat.transform(part))
    fold_row = {"tokens": int(fold.n_tokens), "sequences": int(fold.n_sequences),
                "seconds": m2["cpu_s"], **m2, "transform_cpu_s": m3["cpu_s"],
                "settings": "HMMLikelihoodFeaturizer defaults (3 states per group), "
                            "training learners of one fold (4/5)"}
    print(f"  HMM featurizer, one fold: fit {m2['cpu_s']:.2f} CPU-s, transform of all "
          f"half-sequences {m3['cpu_s']:.3f} CPU-s", flush=True)
    runs = {f"{name}: fit_phases defaults": row, f"{name}: HMM featurizer per fold": fold_row}
    if reference:
        runs[f"{name}: hmmlearn best of five"] = hmmlearn_reference(db, res)
    return runs


def hmmlearn_reference(db, res):
    """hmmlearn's best of five fits from its default starts at each state count, and
    how far the stage's pooled models are from it."""
    import logging

    from hmmlearn.hmm import CategoricalHMM

    logging.getLogger("hmmlearn").setLevel(logging.ERROR)
    X = db.tokens.astype(np.int64).reshape(-1, 1)
    out = {"tokens": int(db.n_tokens), "by_states": {}}
    for r in res.selection.itertuples():
        n = int(r.n_states)
        lls = []
        c0 = cpu_seconds()
        for s in range(5):
            h = CategoricalHMM(n_components=n, n_features=len(db.vocab), n_iter=1000,
                               random_state=s, implementation="scaling")
            h.fit(X, db.lengths)
            lls.append(float(h.score(X, db.lengths)))
        best = max(lls)
        out["by_states"][n] = {"hmmlearn_logliks": lls, "hmmlearn_cpu_s": cpu_seconds() - c0,
                               "ours": float(r.log_likelihood),
                               "ours_minus_best_percent": 100 * (r.log_likelihood - best)
                               / abs(best)}
        print(f"  {n} states: ours {r.log_likelihood:.1f}, hmmlearn best of five {best:.1f} "
              f"({out['by_states'][n]['ours_minus_best_percent']:+.3f} %)", flush=True)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="a 20,000-event course log only")
    ap.add_argument("--reference", action="store_true",
                    help="also fit hmmlearn's best of five at every state count (slow)")
    ap.add_argument("--out", default=str(HERE / "results" / "phases.json"))
    args = ap.parse_args(argv)
    results = {"python": platform.python_version(), "machine": platform.machine(),
               "cpu_count": os.cpu_count(), "quick": args.quick,
               "load_average_at_start": list(os.getloadavg()), "runs": {}}
    n_events, n_learners = (20_000, 30) if args.quick else (95_626, 130)
    ev, oc = write_course_log(DATA / f"course_{n_events}", n_learners, n_events)
    with quiet_mode():
        results["runs"].update(bench_db("course log", encode(ev, oc), args.reference))
        results["runs"].update(bench_db("course log, a sequence per learner",
                                        encode(ev, oc, unit="learner")))
        if not args.quick and (DEMO / "events.csv").is_file():
            results["runs"].update(bench_db("demo data", encode(DEMO / "events.csv",
                                                                DEMO / "outcomes.csv")))
    results["load_average_at_end"] = list(os.getloadavg())
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(results, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    print(f"results written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
