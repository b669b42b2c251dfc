"""Run every stage benchmark and the whole-pipeline benchmark; print and save ONE table.

    python benchmarks/run_all.py            # full sizes (tens of minutes on 2 cores)
    python benchmarks/run_all.py --quick    # small sizes (a few minutes)
    python benchmarks/run_all.py --table-only   # re-tabulate the existing result files
    python benchmarks/run_all.py --only mine,pipeline

Each stage benchmark is its own script in ``benchmarks/`` (run in a subprocess) that
writes a JSON file; this script runs those that exist, reads their files and builds a
table stage x size -> seconds, peak memory, items/s, and two ratios:

* ``vs reference`` -- reference time / our time on the same data, measured side by
  side in the same benchmark (the ``prefixspan`` package for the miner, a plain
  ``pandas.read_csv`` for loading, a per-pattern loop for Westfall-Young, a JSON
  read loop for the live watcher, hmmlearn for HMM scoring); > 1 means faster.
* ``x floor`` -- our time / the time of a single vectorised pass over as many tokens
  (``numpy.bincount`` of an int8 array of that length, best of 5, measured here):
  how far a stage is from merely touching its input once.

The machine may be shared: the load average before and after each benchmark is
recorded beside its rows; compare the columns of one run, not runs on different
days. Writes ``benchmarks/results/run_all.json`` and ``run_all.md``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"

#: name -> (script, full arguments, quick arguments, result file (full), result file (quick))
BENCHMARKS = {
    "demo_data": ("bench_demo_data.py", ["--out", "results/demo_data.json"],
                  ["--learners", "1000", "--out", "results/demo_data_quick.json"],
                  "demo_data.json", "demo_data_quick.json"),
    "encode": ("bench_encode.py", [], ["--quick"], "encode.json", "encode_quick.json"),
    "mine": ("bench_mine.py", [], ["--quick"], "mine.json", "mine.json"),
    "permutation": ("bench_permutation.py", [], ["--quick"], "permutation.json",
                    "permutation_quick.json"),
    "evidence": ("bench_evidence.py", [], ["--quick"], "evidence.json", "evidence_quick.json"),
    "phases": ("bench_phases.py", [], ["--quick", "--out", "results/phases_quick.json"],
               "phases.json", "phases_quick.json"),
    "validate": ("bench_validate.py", [], ["--splits", "3"], "validate.json",
                 "validate_quick.json"),
    "watch": ("bench_watch.py", [], ["--repeat", "1", "--detectors", "10,100",
                                     "--out", "results/watch_quick.json"],
              "watch.json", "watch_quick.json"),
    "startup": ("bench_startup.py", [], ["--repeat", "5", "--out", "results/startup_quick.json"],
                "startup.json", "startup_quick.json"),
    "pipeline": ("bench_pipeline.py", [], ["--quick", "--output",
                                           "results/pipeline_quick.json"],
                 "pipeline.json", "pipeline_quick.json"),
}

#: Benchmarks whose script always writes the full-mode file name.
_FIXED_OUTPUT = ("encode", "validate")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="small sizes")
    ap.add_argument("--table-only", action="store_true",
                    help="do not run anything; tabulate the existing result files")
    ap.add_argument("--only", default=None, help="comma-separated benchmark names: "
                    + ", ".join(BENCHMARKS))
    ap.add_argument("--large", action="store_true",
                    help="also run the whole pipeline at 1e7 events (large-data configuration)")
    args = ap.parse_args(argv)
    names = args.only.split(",") if args.only else list(BENCHMARKS)
    unknown = [n for n in names if n not in BENCHMARKS]
    if unknown:
        ap.error(f"unknown benchmark(s) {unknown}; choose from {', '.join(BENCHMARKS)}")
    meta_path = RESULTS / ("run_all_quick_runs.json" if args.quick else "run_all_runs.json")
    runs = json.loads(meta_path.read_text()) if meta_path.is_file() else {}
    for name in names:
        script, full, quick, _, _ = BENCHMARKS[name]
        if args.table_only or not (HERE / script).is_file():
            continue
        extra = quick if args.quick else full
        if name == "pipeline" and args.large and not args.quick:
            extra = extra + ["--sizes", "1e5,1e6,1e7"]
        written = BENCHMARKS[name][3]
        if args.quick and name in _FIXED_OUTPUT:    # keep the full result file intact
            backup = (RESULTS / written).read_bytes() if (RESULTS / written).is_file() else None
            runs[name] = _run(script, extra)
            if (RESULTS / written).is_file():
                (RESULTS / written).replace(RESULTS / BENCHMARKS[name][4])
            if backup is not None:
                (RESULTS / written).write_bytes(backup)
        else:
            runs[name] = _run(script, extra)
        meta_path.parent.mkdir(parents=True, exist_ok=True)
        meta_path.write_text(json.dumps(runs, indent=1) + "\n")
    rows = []
    for name in BENCHMARKS:
        _, _, _, full_file, quick_file = BENCHMARKS[name]
        path = RESULTS / (quick_file if args.quick else full_file)
        if not path.is_file():
            continue
        data = json.loads(path.read_text())
        for row in ADAPTERS[name](data):
            row.setdefault("benchmark", name)
            if not row.get("load_avg"):
                row["load_avg"] = runs.get(name, {}).get("load_avg", "")
            rows.append(row)
    _add_floor(rows)
    table = format_table(rows)
    print(table)
    stem = "run_all_quick" if args.quick else "run_all"
    out = {"machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                       "platform": platform.platform()},
           "mode": "quick" if args.quick else "full", "runs": runs, "rows": rows}
    (RESULTS / f"{stem}.json").write_text(json.dumps(out, indent=1) + "\n")
    (RESULTS / f"{stem}.md").write_text(
        f"# Benchmark table ({out['mode']} mode)\n\n{__doc__.split(chr(10) + chr(10))[2]}\n\n"
        + format_markdown(rows) + "\n")
    print(f"\nwritten {RESULTS / (stem + '.json')} and {RESULTS / (stem + '.md')}")
    return rows


# ------------------------------------------------------------------ running
def _run(script, extra):
    load0 = os.getloadavg()
    t0 = time.perf_counter()
    print(f"== {script} {' '.join(extra)}", file=sys.stderr, flush=True)
    env = dict(os.environ, PYTHONPATH=str(HERE.parent) + os.pathsep
               + os.environ.get("PYTHONPATH", ""), SEQMINE_QUIET="1")
    proc = subprocess.run([sys.executable, str(HERE / script), *extra], cwd=HERE, env=env,
                          capture_output=True, text=True)
    load1 = os.getloadavg()
    rec = {"seconds": round(time.perf_counter() - t0, 1), "returncode": proc.returncode,
           "load_avg": f"{load0[0]:.1f}-{load1[0]:.1f}"}
    if proc.returncode != 0:
        rec["stderr_tail"] = proc.stderr[-2000:]
        print(f"   FAILED ({proc.returncode}):\n{proc.stderr[-2000:]}", file=sys.stderr)
    return rec


def _add_floor(rows):
    """Seconds of one ``np.bincount`` pass over ``size`` int8 tokens (best of 5)."""
    cache = {}
    for r in rows:
        n = r.get("tokens") or r.get("events")
        if not n or r.get("seconds") is None:
            continue
        n = int(n)
        if n not in cache:
            x = np.random.default_rng(0).integers(0, 40, size=n).astype(np.int8)
            best = float("inf")
            for _ in range(5):
                t0 = time.perf_counter()
                np.bincount(x, minlength=40)
                best = min(best, time.perf_counter() - t0)
            cache[n] = best
        r["floor_seconds"] = cache[n]
        r["x_floor"] = r["seconds"] / cache[n] if cache[n] > 0 else None


# ----------------------------------------------------------------- adapters
def _row(stage, *, events=None, tokens=None, seconds=None, peak_mb=None, reference=None,
         vs_reference=None, note=""):
    size = tokens if tokens else events
    per_s = size / seconds if size and seconds else None
    return {"stage": stage, "events": events, "tokens": tokens, "seconds": seconds,
            "peak_mb": peak_mb, "items_per_s": per_s, "reference": reference,
            "vs_reference": vs_reference, "note": note}


def _demo_data(data):
    return [_row(f"generate demo data ({r['format']})", events=r["events"],
                 seconds=r["generate_and_write_s"], peak_mb=r.get("max_rss_mb"))
            for r in data]


def _encode(data):
    rows = []
    for r in data:
        rows.append(_row("load events (CSV)", events=r["events"], seconds=r["load_s"],
                         peak_mb=r.get("load_peak_mb"), reference="pandas.read_csv",
                         vs_reference=1 / r["load_vs_read_csv"] if r.get("load_vs_read_csv")
                         else None))
        rows.append(_row("encode", events=r["events"], tokens=r.get("tokens"),
                         seconds=r["encode_s"], peak_mb=r.get("encode_peak_mb")))
    return rows


def _mine(data):
    rows = []
    for r in data.get("reference", []):
        rows.append(_row("mine, supports (vs prefixspan)", tokens=r["tokens"],
                         seconds=r["ours_supports_s"], peak_mb=r.get("peak_rss_mb"),
                         reference="prefixspan package", vs_reference=r.get("speedup_supports"),
                         note=f"{r.get('patterns')} patterns, identical="
                              f"{r.get('identical_output')}"))
        if "ours_full_s" in r:
            rows.append(_row("mine, full output", tokens=r["tokens"], seconds=r["ours_full_s"],
                             reference="prefixspan package", vs_reference=r.get("speedup_full"),
                             note="per-group supports + instance-count matrix"))
    for name, entries in (data.get("scaling") or {}).items():
        for r in entries:
            rows.append(_row(f"mine: {name}", tokens=r["tokens"], seconds=r["seconds"],
                             peak_mb=r.get("peak_rss_mb"), note=f"{r.get('patterns')} patterns"))
    return rows


def _permutation(data):
    n = data.get("learners")
    rows = [_row("Westfall-Young min-P (presence)", events=None, tokens=None,
                 seconds=data.get("westfall_young_seconds"), peak_mb=data.get("peak_rss_mb"),
                 reference="per-pattern loop (extrapolated)",
                 vs_reference=data.get("speedup_vs_naive"),
                 note=f"{n} sequences x {data.get('patterns')} patterns x "
                      f"{data.get('permutations')} permutations")]
    if data.get("westfall_young_rates_seconds"):
        rows.append(_row("Westfall-Young min-P (rates)",
                         seconds=data["westfall_young_rates_seconds"],
                         note=f"{n} sequences x {data.get('patterns')} patterns"))
    if data.get("contrast_bh_stability100_seconds"):
        rows.append(_row("contrast (BH, 100 stability resamples)",
                         seconds=data["contrast_bh_stability100_seconds"],
                         note=f"{n} sequences x {data.get('patterns')} patterns"))
    return rows


def _phases(data):
    rows = []
    for name, r in sorted((data.get("runs") or {}).items()):
        sec = r.get("seconds", r.get("ours_seconds", r.get("fit_seconds")))
        if sec is None:
            continue
        ref = "hmmlearn" if "hmmlearn_seconds" in r else None
        vs = r["hmmlearn_seconds"] / r["ours_seconds"] if ref else None
        rows.append(_row(f"phases: {name}", tokens=r.get("tokens"), seconds=sec,
                         reference=ref, vs_reference=vs, note=r.get("settings", "")))
    return rows


def _validate(data):
    rows = []
    for key, sec in (data.get("seconds") or {}).items():
        rows.append(_row(f"validate, {data.get('folds')} folds ({key})",
                         events=data.get("events"), seconds=sec,
                         note=f"{data.get('learners')} learners; parallel identical: "
                              f"{data.get('parallel_identical_to_serial')}"))
    return rows


def _watch(data):
    rows = []
    for r in data.get("rows", []):
        sec = r["events"] / r["watch_events_per_s"]
        rows.append(_row(f"watch, {r['detectors']} detectors", events=r["events"], seconds=sec,
                         reference="JSON read loop",
                         vs_reference=1 / r["watch_vs_plain_time_ratio"],
                         note=f"p50 {r.get('latency_p50_us')} us, p99 "
                              f"{r.get('latency_p99_us')} us per event"))
    return rows


def _pipeline(data):
    rows = []
    for r in data:
        tag = f"{r['config']} config, jobs={r.get('jobs', 1)}"
        load = f"{r.get('load_avg_start', 0):.1f}-{r.get('load_avg_end', 0):.1f}"
        model = r.get("memory_model", {})
        for stage, sec in r["stage_seconds"].items():
            ratio = model.get(stage, {}).get("measured_over_model")
            rows.append(_row(f"analyze: {stage}", events=r["events"], seconds=sec,
                             peak_mb=r["stage_peak_mb"].get(stage),
                             note=tag + ("" if ratio is None else
                                         f"; peak/memory model {ratio:.2f}")))
            rows[-1]["load_avg"] = load
        rows.append(_row("analyze: TOTAL", events=r["events"], seconds=r["wall_s"],
                         peak_mb=r["peak_mb"], note=f"{tag}; {r['tokens']} tokens, "
                         f"{r['peak_bytes_per_event']:.0f} peak bytes/event"))
        rows[-1]["load_avg"] = load
    return rows


def _startup(data):
    rows = []
    for r in data["rows"][1:]:
        # reference time / ours, so > 1 would be faster than a bare start (it never is)
        rows.append(_row(r["command"], seconds=r["best_s"],
                         reference="python -c 'import argparse'",
                         vs_reference=1 / r["x_reference_best"],
                         note=f"{r['x_reference_best']:.2f}x a bare start (target <= 5x)"))
    return rows


def _evidence(data):
    """Rows of bench_evidence.py: CPU seconds per step, ratios to Fisher scoring (tests)
    and to the bootstrap (replication), measured side by side in one process."""
    steps = data.get("steps", {})
    size = f"{data.get('learners')} learners x {data.get('patterns')} patterns"
    ref = {"volume-adjusted test (CMH over strata) + BH": "ratio_volume_to_fisher_cpu",
           "order test (holders, chance bins, CMH) + BH": "ratio_order_to_fisher_cpu",
           "replication, 20 splits (30 % findings, half by order test)":
               "ratio_replication_to_bootstrap_cpu"}
    rows = []
    for name, r in steps.items():
        ratio = data.get(ref.get(name, ""), None)
        rows.append(_row(name, seconds=r.get("cpu_s"), peak_mb=data.get("peak_rss_mb"),
                         reference=("bootstrap stability" if "replication" in name else
                                    "Fisher scoring") if ratio else None,
                         vs_reference=1 / ratio if ratio else None,
                         note=f"{size}; CPU seconds"))
    return rows


ADAPTERS = {"startup": _startup, "demo_data": _demo_data, "encode": _encode, "mine": _mine,
            "permutation": _permutation, "evidence": _evidence, "phases": _phases,
            "validate": _validate,
            "watch": _watch, "pipeline": _pipeline}


# ----------------------------------------------------------------- printing
COLUMNS = [("stage", "stage", "{}"), ("size", None, "{}"), ("seconds", "seconds", "{:.3g}"),
           ("peak MB", "peak_mb", "{:.0f}"), ("items/s", "items_per_s", "{:,.0f}"),
           ("vs reference", "vs_reference", "{:.3g}x"), ("x floor", "x_floor", "{:,.0f}"),
           ("load avg", "load_avg", "{}"), ("note", "note", "{}")]


def _cells(r):
    out = []
    for _, key, fmt in COLUMNS:
        if key is None:
            size = (f"{r['tokens']:,} tok" if r.get("tokens")
                    else f"{r['events']:,} ev" if r.get("events") else "")
            out.append(size)
            continue
        v = r.get(key)
        if key == "vs_reference" and v is not None and r.get("reference"):
            out.append(fmt.format(v) + f" ({r['reference']})")
        else:
            out.append("" if v is None or v == "" else fmt.format(v))
    return out


def format_table(rows):
    cells = [[c[0] for c in COLUMNS]] + [_cells(r) for r in rows]
    width = [max(len(row[i]) for row in cells) for i in range(len(COLUMNS))]
    lines = ["  ".join(v.ljust(width[i]) for i, v in enumerate(row)).rstrip() for row in cells]
    lines.insert(1, "  ".join("-" * w for w in width))
    return "\n".join(lines)


def format_markdown(rows):
    head = "| " + " | ".join(c[0] for c in COLUMNS) + " |"
    sep = "|" + "|".join("---" for _ in COLUMNS) + "|"
    body = ["| " + " | ".join(c.replace("|", "/") for c in _cells(r)) + " |" for r in rows]
    return "\n".join([head, sep, *body])


if __name__ == "__main__":
    main()
