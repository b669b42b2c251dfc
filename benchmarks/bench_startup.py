"""Start-up of the command line, measured side by side with a bare Python start.

    python benchmarks/bench_startup.py [--repeat 15] [--out results/startup.json]

Runs, interleaved, ``python -c "import argparse"`` (the reference: an interpreter that
starts and imports the argument parser), ``seqmine --help``, ``seqmine analyze --help``
and ``seqmine watch --help`` through ``python -m seqmine``, and reports the best and
the median wall time of each with the ratio to the reference (target: within 5x). The
best of many runs is the figure least disturbed by other work on a shared machine; the
load average is recorded beside it.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

COMMANDS = {
    "python -c 'import argparse' (reference)": [sys.executable, "-c", "import argparse"],
    "seqmine --help": [sys.executable, "-m", "seqmine", "--help"],
    "seqmine analyze --help": [sys.executable, "-m", "seqmine", "analyze", "--help"],
    "seqmine watch --help": [sys.executable, "-m", "seqmine", "watch", "--help"],
}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--out", default=str(HERE / "results" / "startup.json"))
    args = ap.parse_args(argv)
    env = dict(os.environ, PYTHONPATH=str(HERE.parent) + os.pathsep
               + os.environ.get("PYTHONPATH", ""))
    times = {name: [] for name in COMMANDS}
    load0 = os.getloadavg()
    for _ in range(args.repeat):
        for name, cmd in COMMANDS.items():   # interleaved: load changes hit all alike
            t0 = time.perf_counter()
            subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL, check=True)
            times[name].append(time.perf_counter() - t0)
    load1 = os.getloadavg()
    ref_name = next(iter(COMMANDS))
    ref_best, ref_median = min(times[ref_name]), statistics.median(times[ref_name])
    rows = []
    for name, ts in times.items():
        best, median = min(ts), statistics.median(ts)
        rows.append({"command": name, "best_s": round(best, 4), "median_s": round(median, 4),
                     "x_reference_best": round(best / ref_best, 2),
                     "x_reference_median": round(median / ref_median, 2)})
    result = {"python": platform.python_version(), "cpu_count": os.cpu_count(),
              "repeat": args.repeat,
              "load_average": [round(load0[0], 2), round(load1[0], 2)], "rows": rows}
    print(f"{'command':45} {'best s':>8} {'median s':>9} {'x ref (best)':>13} "
          f"{'x ref (median)':>15}")
    for r in rows:
        print(f"{r['command']:45} {r['best_s']:8.3f} {r['median_s']:9.3f} "
              f"{r['x_reference_best']:13.2f} {r['x_reference_median']:15.2f}")
    print(f"load average {load0[0]:.2f} -> {load1[0]:.2f}")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
