"""Benchmark: generation and writing of large greenhouse data sets (time and peak memory).

Run: python benchmarks/bench_demo_data.py [--learners 10000] [--out results.json]
Each size runs in a fresh process so peak memory (max RSS) belongs to that run alone.
"""

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

CHILD = r"""
import json, resource, sys, time
n = int(sys.argv[1]); fmt = sys.argv[2]; folder = sys.argv[3]
import seqmine.demo_data as dd
base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
t0 = time.perf_counter(); data = dd.generate_greenhouse(n); t1 = time.perf_counter()
gen_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
n_events = len(data.events); del data
t2 = time.perf_counter(); dd.write_greenhouse(folder, n, events_format=fmt); t3 = time.perf_counter()
print(json.dumps({"learners": n, "events": n_events, "format": fmt,
                  "generate_s": round(t1 - t0, 3), "generate_and_write_s": round(t3 - t2, 3),
                  "generate_max_rss_mb": round(gen_rss / 1024, 1),
                  "max_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1),
                  "rss_after_import_mb": round(base / 1024, 1)}))
"""


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--learners", type=int, nargs="+", default=[1000, 10000])
    ap.add_argument("--formats", nargs="+", default=["csv"])
    ap.add_argument("--out", default="benchmarks/results/demo_data.json")
    args = ap.parse_args(argv)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.learners:
            for fmt in args.formats:
                res = subprocess.run([sys.executable, "-c", CHILD, str(n), fmt, tmp],
                                     capture_output=True, text=True, check=True)
                row = json.loads(res.stdout.strip().splitlines()[-1])
                row["events_per_s"] = round(row["events"] / row["generate_s"])
                size = (Path(tmp) / f"events.{fmt}").stat().st_size
                row["events_file_mb"] = round(size / 1e6, 1)
                print(json.dumps(row))
                rows.append(row)
    Path(args.out).write_text(json.dumps(rows, indent=2) + "\n", encoding="utf-8")
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
