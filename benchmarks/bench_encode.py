"""Load + encode cost on generated greenhouse logs, side by side with a plain CSV read.

Each stage runs in a fresh subprocess so its peak resident memory (ru_maxrss) is its own.
Prints a table and writes benchmarks/results/encode.json.

    python benchmarks/bench_encode.py            # 10^5 and 10^6 events
    python benchmarks/bench_encode.py --quick    # 10^4 and 10^5 events
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent

STAGE = r'''
import json, resource, sys, time
sys.path.insert(0, {root!r})
import pandas as pd
from seqmine.inputs.load import load_events
from seqmine.encoding.encoder import Encoder
path, stage = sys.argv[1], sys.argv[2]
t0 = time.perf_counter()
if stage == "read_csv":
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    n = len(df)
elif stage == "load":
    res = load_events(path)
    n = res.n_kept
else:
    res = load_events(path)
    t1 = time.perf_counter()
    db = Encoder().fit_transform(res.events)
    n = db.n_tokens
    t0 = t1
dt = time.perf_counter() - t0
print(json.dumps({{"seconds": dt, "n": n,
                  "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}}))
'''


def run_stage(path, stage):
    code = STAGE.format(root=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code, str(path), stage], check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    from seqmine.demo_data import write_greenhouse
    sizes = [100, 1_000] if args.quick else [1_000, 10_000]  # learners (~100 events each)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n_learners in sizes:
            folder = Path(tmp) / f"g{n_learners}"
            t0 = time.perf_counter()
            paths = write_greenhouse(folder, n_learners, random_state=7)
            gen = time.perf_counter() - t0
            floor = run_stage(paths["events"], "read_csv")
            load = run_stage(paths["events"], "load")
            enc = run_stage(paths["events"], "encode")
            n_events = floor["n"]
            rows.append({
                "learners": n_learners, "events": n_events, "generate_s": round(gen, 3),
                "read_csv_s": round(floor["seconds"], 3), "load_s": round(load["seconds"], 3),
                "load_vs_read_csv": round(load["seconds"] / floor["seconds"], 2),
                "encode_s": round(enc["seconds"], 3), "tokens": enc["n"],
                "load_peak_mb": round(load["peak_mb"], 1), "encode_peak_mb": round(enc["peak_mb"], 1),
                "events_per_s_load_encode": round(n_events / (load["seconds"] + enc["seconds"])),
                "peak_bytes_per_event": round(enc["peak_mb"] * 2**20 / n_events),
            })
    cols = list(rows[0])
    print(" | ".join(cols))
    for r in rows:
        print(" | ".join(str(r[c]) for c in cols))
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "encode.json").write_text(json.dumps(rows, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
