"""Whole ``analyze`` pipeline on generated greenhouse data: time and peak memory per stage.

Each size runs in a fresh subprocess. A sampling thread in that process reads its
resident memory (``/proc/self/statm``) every 20 ms and keeps the peak of each stage
(stage boundaries are the ones ``analyze`` times in ``stage_seconds``); the overall
peak is ``ru_maxrss``. Prints a table and writes ``benchmarks/results/pipeline.json``.

    python benchmarks/bench_pipeline.py                 # 1e5 and 1e6 events
    python benchmarks/bench_pipeline.py --quick         # 1e4 and 1e5 events
    python benchmarks/bench_pipeline.py --sizes 1e7     # the large run (large-data config)
    python benchmarks/bench_pipeline.py --course        # the 95,626-event course log, and
                                                        # `seqmine demo`

``--course`` runs ``analyze`` with the shipped defaults on the seven-week course log of
``_course_log.py`` (95,626 events, 130 learners, 1-second clock; a sequence per
session), once more with one sequence per learner, and times ``seqmine demo`` (wall clock, the
figure a user sees). Every record also holds the CPU seconds of ``analyze`` and of
each stage (``resource.getrusage`` of the process and its children) and the 1-minute
load average before and after.

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
import resource
import shutil
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
import contextlib, json, os, resource, sys, threading, time
sys.path.insert(0, {root!r})
events, outcomes, out, cfg_json = sys.argv[1:5]
page = os.sysconf("SC_PAGE_SIZE")
state = {{"stage": "startup", "peaks": {{}}, "run": True}}

def rss():
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * page

def cpu():
    total = 0.0
    for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN):
        r = resource.getrusage(who)
        total += r.ru_utime + r.ru_stime
    return total

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
real_call = pl._RunStages.stage
stage_cpu = {{}}
@contextlib.contextmanager
def tracking_call(self, name, label, *args, **kwargs):
    state["stage"] = label
    c0 = cpu()
    with real_call(self, name, label, *args, **kwargs) as owned:
        yield owned
    stage_cpu[label] = round(cpu() - c0, 3)
pl._RunStages.stage = tracking_call
t = threading.Thread(target=sample, daemon=True)
state["stage"] = "loading and encoding"
t.start()
cfg = merge_config(default_config(), json.loads(cfg_json))
t0 = time.perf_counter()
c0 = cpu()
res = pl.analyze(events, outcomes, out, cfg, quiet=True)
wall = time.perf_counter() - t0
cpu_s = cpu() - c0
# what runs between the stages (reading the configuration, staging and moving the
# output folder, the run record)
stage_cpu["outside the stages"] = round(cpu_s - sum(stage_cpu.values()), 3)
state["run"] = False
t.join()
s = res.summary
print(json.dumps({{
    "wall_s": wall, "stage_seconds": s["stage_seconds"], "cpu_s": cpu_s,
    "stage_cpu_s": stage_cpu, "warnings": [w["code"] for w in s.get("warnings", [])],
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


def run_size(n_events, config_name, jobs=1, scheduler=None, fmt=None, out_root=None,
             data=None, extra=None, label=None):
    """Run ``analyze`` once in a subprocess; returns the measurement dict.

    ``data`` gives ``(events, outcomes)`` paths instead of generated greenhouse data,
    ``extra`` configuration overrides, ``label`` a name for the data set."""
    cfg = dict(LARGE_CONFIG) if config_name == "large" else {}
    cfg.update(extra or {})
    fmt = fmt or ("parquet" if config_name == "large" else "csv")
    cfg["n_jobs"] = jobs
    if scheduler:
        cfg["scheduler"] = scheduler
    ev, oc = data or dataset(n_events, fmt)
    tag = label.replace(" ", "_").replace(",", "") if label else ev.parent.name
    out = Path(out_root or DATA / "out") / f"{tag}_{config_name}"
    shutil.rmtree(out, ignore_errors=True)      # our scratch folder of the last run
    load0 = os.getloadavg()[0]
    proc = subprocess.run([sys.executable, "-c", CHILD.format(root=str(ROOT)), str(ev), str(oc),
                           str(out), json.dumps(cfg)], capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"analyze failed at {n_events} events:\n{proc.stderr[-3000:]}")
    rec = json.loads(proc.stdout.strip().splitlines()[-1])
    rec.update(target_events=n_events, config=config_name, input_format=fmt, jobs=jobs,
               dataset=label or "greenhouse",
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
        if "demo_wall_s" in r:
            print(f"\nseqmine demo: {r['demo_wall_s']:.1f} s wall, {r['cpu_s']:.1f} CPU-s; "
                  f"load average {r['load_avg_start']} -> {r['load_avg_end']}", file=file)
            continue
        print(f"\n{r.get('dataset', 'greenhouse')}: {r['events']:,} events, {r['tokens']:,} "
              f"tokens, {r['sequences']:,} sequences "
              f"({r['config']} config, {r['input_format']}, jobs={r['jobs']}); "
              f"load average {r['load_avg_start']} -> {r['load_avg_end']}", file=file)
        print(f"  {'stage':<22} {'seconds':>9} {'CPU-s':>7} {'peak MB':>9} {'model MB':>9} "
              f"{'peak/model':>10}", file=file)
        model = r.get("memory_model", {})
        cpu = r.get("stage_cpu_s", {})
        for stage, sec in r["stage_seconds"].items():
            m = model.get(stage, {})
            ratio = m.get("measured_over_model")
            print(f"  {stage:<22} {sec:>9.2f} {cpu.get(stage, float('nan')):>7.2f} "
                  f"{r['stage_peak_mb'].get(stage, float('nan')):>9.0f} "
                  f"{m.get('model_mb', float('nan')):>9.0f} "
                  f"{'' if ratio is None else format(ratio, '.2f'):>10}", file=file)
        print(f"  {'total':<22} {r['wall_s']:>9.2f} {r.get('cpu_s', float('nan')):>7.2f} "
              f"{r['peak_mb']:>9.0f}   ({r['events_per_s']:,.0f} events/s, "
              f"{r['peak_bytes_per_event']:,.0f} peak bytes/event)", file=file)


def run_course(per_learner=False):
    """``analyze`` with the defaults on the 95,626-event course log (``per_learner``:
    one sequence per learner instead of one per session)."""
    sys.path.insert(0, str(HERE))
    from _course_log import write_course_log

    ev, oc = write_course_log(DATA / "course_95626")
    extra, label = {}, "course log"
    if per_learner:
        extra = {"encode": {"unit": "learner"}}
        label = "course log, a sequence per learner"
    return run_size(95_626, "default", data=(ev, oc), extra=extra, label=label)


def run_demo():
    """Wall clock and CPU seconds of ``seqmine demo`` (a fresh process)."""
    out = DATA / "out" / "demo"
    shutil.rmtree(out, ignore_errors=True)
    load0 = os.getloadavg()[0]
    c0 = _children_cpu()
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "seqmine", "demo", "--out", str(out),
                           "--quiet"], capture_output=True, text=True, cwd=str(ROOT))
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"seqmine demo failed:\n{proc.stderr[-3000:]}")
    return {"dataset": "seqmine demo", "config": "default", "target_events": 0, "jobs": 1,
            "demo_wall_s": round(wall, 2), "cpu_s": round(_children_cpu() - c0, 2),
            "load_avg_start": round(load0, 2), "load_avg_end": round(os.getloadavg()[0], 2)}


def _children_cpu():
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="1e4 and 1e5 events")
    ap.add_argument("--course", action="store_true",
                    help="the 95,626-event course log (sessions, and a sequence per "
                         "learner) and `seqmine demo`, with the defaults")
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
    if args.course:
        sizes = []
        for per_learner in (False, True):
            print("analyze on the course log"
                  + (" (a sequence per learner)" if per_learner else "") + " ...",
                  file=sys.stderr, flush=True)
            records.append(run_course(per_learner))
            print_table(records[-1:])
        records.append(run_demo())
        print_table(records[-1:])
    for n in sizes:
        name = args.config or ("large" if n >= 1_000_000 else "default")
        print(f"analyze at ~{n:,} events ({name} config) ...", file=sys.stderr, flush=True)
        records.append(run_size(n, name, jobs=args.jobs, scheduler=args.scheduler))
        print_table(records[-1:])
    out = Path(args.output)
    out.parent.mkdir(parents=True, exist_ok=True)
    old = json.loads(out.read_text()) if out.is_file() else []
    def key(r):
        return (r["target_events"], r["config"], r.get("jobs", 1),
                r.get("dataset", "greenhouse"))

    new = {key(r) for r in records}
    keep = [r for r in old if key(r) not in new]
    for r in keep:
        if "stage_peak_mb" in r:
            r["memory_model"] = check_memory_model(r)
    out.write_text(json.dumps(sorted(keep + records, key=key), indent=1) + "\n")
    print(f"\nwritten {out}")
    return records


if __name__ == "__main__":
    main()
