"""Whole ``analyze`` pipeline on generated greenhouse data: time and peak memory per stage.

Each size runs in a fresh subprocess. A sampling thread in that process reads its
resident memory (``/proc/self/statm``) every 20 ms and keeps the peak of each stage
(stage boundaries are the ones ``analyze`` times in ``stage_seconds``); the overall
peak is ``ru_maxrss``. Prints a table and writes ``benchmarks/results/pipeline.json``.

    python benchmarks/bench_pipeline.py                 # 1e5 and 1e6 events
    python benchmarks/bench_pipeline.py --quick         # 1e4 and 1e5 events
    python benchmarks/bench_pipeline.py --sizes 1e7     # the large run (large-data config)

Configurations (``--config default|large``; default: ``default`` below 1e6 events,
``large`` from 1e6 on -- with the shipped defaults the phase models alone took 241 s
at 1e5 events, so about 40 minutes at 1e6 by extrapolation):

* ``default`` -- the shipped defaults of ``seqmine analyze`` (BH correction, phase
  models 2-5 states x 3 restarts, 5-fold early-prediction check with 500 bootstraps).
* ``large`` -- the documented large-data configuration (see docs/scaling.md):
  Parquet input; phase models on a seeded sample of 2,000 sequences at one state
  count (3) with one restart and 20 EM iterations; early-prediction check on a
  seeded sample of 5,000 learners with 2 folds, fractions 0.5 and 1.0 and 100
  bootstrap resamples; mining, scoring, transitions, detectors and the report on
  all the data with the defaults.

The data are ``seqmine.demo_data.write_greenhouse(folder, n_learners)`` (about 100
events per learner), cached in ``benchmarks/.data/`` between runs.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
DATA = HERE / ".data"
EVENTS_PER_LEARNER = 100   # write_greenhouse draws 60-150 events per learner

LARGE_CONFIG = {
    "phases": {"min_states": 3, "max_states": 3, "n_restarts": 1, "n_iter": 20,
               "max_sequences": 2000},
    "validate": {"n_splits": 2, "fractions": [0.5, 1.0], "n_bootstrap": 100,
                 "max_learners": 5000},
}

#: Memory model of ``analyze`` (large-data configuration, jobs=1): peak resident memory
#: of each stage ~= fixed MB + bytes per event x events. Fitted on the 1e6 and 1e7 runs
#: of 2026-12-02 (see docs/scaling.md); every run prints measured / model per stage, so
#: a code change that breaks the model (ratio well above 1) shows up here.
MEMORY_MODEL = {
    "loading and encoding": (344, 675),
    "mining patterns": (333, 301),
    "scoring patterns": (291, 511),
    "transitions": (282, 334),
    "phase models": (376, 275),
    "early prediction": (525, 272),
    "detectors": (431, 272),
    "report": (431, 272),
}

CHILD = r'''
import json, os, resource, sys, threading, time
sys.path.insert(0, {root!r})
events, outcomes, out, cfg_json = sys.argv[1:5]
page = os.sysconf("SC_PAGE_SIZE")
state = {{"stage": "startup", "peaks": {{}}, "run": True}}

def rss():
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * page

def sample():
    while state["run"]:
        r = rss()
        s = state["stage"]
        if r > state["peaks"].get(s, 0):
            state["peaks"][s] = r
        time.sleep(0.02)

import seqmine.pipeline as pl
from seqmine.config import default_config, merge_config
state["rss_after_import"] = rss()
real_call = pl._Stages.__call__
def tracking_call(self, name):
    state["stage"] = name
    return real_call(self, name)
pl._Stages.__call__ = tracking_call
t = threading.Thread(target=sample, daemon=True)
state["stage"] = "loading and encoding"
t.start()
cfg = merge_config(default_config(), json.loads(cfg_json))
t0 = time.perf_counter()
res = pl.analyze(events, outcomes, out, cfg, quiet=True)
wall = time.perf_counter() - t0
state["run"] = False
t.join()
s = res.summary
print(json.dumps({{
    "wall_s": wall, "stage_seconds": s["stage_seconds"],
    "stage_peak_mb": {{k: v / 2**20 for k, v in state["peaks"].items()}},
    "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    "children_peak_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024,
    "rss_after_import_mb": state["rss_after_import"] / 2**20,
    "events": s.get("rows_kept"), "tokens": s.get("tokens"), "sequences": s.get("sequences"),
    "patterns_mined": s.get("patterns_mined"),
    "patterns_significant": s.get("patterns_significant")}}))
'''


def dataset(n_events, fmt):
    """Cached greenhouse data with about ``n_events`` events: (events path, outcomes path)."""
    from seqmine.demo_data import write_greenhouse

    n_learners = max(20, int(round(n_events / EVENTS_PER_LEARNER)))
    folder = DATA / f"greenhouse_{n_learners}_{fmt}"
    ev = folder / f"events.{fmt}"
    oc = folder / "outcomes.csv"
    if not (ev.is_file() and oc.is_file()):
        t0 = time.perf_counter()
        write_greenhouse(folder, n_learners, events_format=fmt)
        print(f"  generated {n_learners} learners ({fmt}) in {time.perf_counter() - t0:.1f} s",
              file=sys.stderr, flush=True)
    return ev, oc


def run_size(n_events, config_name, jobs=1, scheduler=None, fmt=None, out_root=None):
    """Run ``analyze`` once in a subprocess; returns the measurement dict."""
    cfg = dict(LARGE_CONFIG) if config_name == "large" else {}
    fmt = fmt or ("parquet" if config_name == "large" else "csv")
    cfg["n_jobs"] = jobs
    if scheduler:
        cfg["scheduler"] = scheduler
    ev, oc = dataset(n_events, fmt)
    out = Path(out_root or DATA / "out") / f"{ev.parent.name}_{config_name}"
    load0 = os.getloadavg()[0]
    proc = subprocess.run([sys.executable, "-c", CHILD.format(root=str(ROOT)), str(ev), str(oc),
                           str(out), json.dumps(cfg)], capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"analyze failed at {n_events} events:\n{proc.stderr[-3000:]}")
    rec = json.loads(proc.stdout.strip().splitlines()[-1])
    rec.update(target_events=n_events, config=config_name, input_format=fmt, jobs=jobs,
               scheduler=scheduler, load_avg_start=round(load0, 2),
               load_avg_end=round(os.getloadavg()[0], 2),
               events_per_s=rec["events"] / rec["wall_s"],
               peak_bytes_per_event=rec["peak_mb"] * 2**20 / rec["events"])
    rec["memory_model"] = check_memory_model(rec)
    return rec


def check_memory_model(rec):
    """Model peak MB per stage and measured / model, from :data:`MEMORY_MODEL`."""
    out = {}
    for stage, (fixed, per_event) in MEMORY_MODEL.items():
        model = fixed + per_event * rec["events"] / 2**20
        measured = rec["stage_peak_mb"].get(stage)
        out[stage] = {"model_mb": round(model, 1),
                      "measured_over_model": None if measured is None else
                      round(measured / model, 3)}
    return out


def print_table(records, file=sys.stdout):
    for r in records:
        print(f"\n{r['events']:,} events, {r['tokens']:,} tokens, {r['sequences']:,} sequences "
              f"({r['config']} config, {r['input_format']}, jobs={r['jobs']}); "
              f"load average {r['load_avg_start']} -> {r['load_avg_end']}", file=file)
        print(f"  {'stage':<22} {'seconds':>9} {'peak MB':>9} {'model MB':>9} "
              f"{'peak/model':>10}", file=file)
        model = r.get("memory_model", {})
        for stage, sec in r["stage_seconds"].items():
            m = model.get(stage, {})
            ratio = m.get("measured_over_model")
            print(f"  {stage:<22} {sec:>9.2f} {r['stage_peak_mb'].get(stage, float('nan')):>9.0f} "
                  f"{m.get('model_mb', float('nan')):>9.0f} "
                  f"{'' if ratio is None else format(ratio, '.2f'):>10}", file=file)
        print(f"  {'total':<22} {r['wall_s']:>9.2f} {r['peak_mb']:>9.0f}   "
              f"({r['events_per_s']:,.0f} events/s, {r['peak_bytes_per_event']:,.0f} "
              f"peak bytes/event)", file=file)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="1e4 and 1e5 events")
    ap.add_argument("--sizes", default=None, help="comma-separated event counts, e.g. 1e5,1e6")
    ap.add_argument("--config", choices=["default", "large"], default=None)
    ap.add_argument("--jobs", type=int, default=1)
    ap.add_argument("--scheduler", default=None)
    ap.add_argument("--output", default=str(HERE / "results" / "pipeline.json"))
    args = ap.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    if args.sizes:
        sizes = [int(float(x)) for x in args.sizes.split(",")]
    else:
        sizes = [10_000, 100_000] if args.quick else [100_000, 1_000_000]
    records = []
    for n in sizes:
        name = args.config or ("large" if n >= 1_000_000 else "default")
        print(f"analyze at ~{n:,} events ({name} config) ...", file=sys.stderr, flush=True)
        records.append(run_size(n, name, jobs=args.jobs, scheduler=args.scheduler))
        print_table(records[-1:])
    out = Path(args.output)
    out.parent.mkdir(parents=True, exist_ok=True)
    old = json.loads(out.read_text()) if out.is_file() else []
    keep = [r for r in old if (r["target_events"], r["config"], r.get("jobs", 1)) not in
            {(r2["target_events"], r2["config"], r2["jobs"]) for r2 in records}]
    for r in keep:
        r["memory_model"] = check_memory_model(r)
    out.write_text(json.dumps(sorted(keep + records, key=lambda r: (r["target_events"],
                                                                    r["config"])), indent=1)
                   + "\n")
    print(f"\nwritten {out}")
    return records


if __name__ == "__main__":
    main()
