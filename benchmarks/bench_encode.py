"""Load + encode cost on generated greenhouse logs, side by side with a plain CSV read.

Each stage runs in a fresh subprocess so its peak resident memory (ru_maxrss) is its own.
Prints a table and writes benchmarks/results/encode.json.

    python benchmarks/bench_encode.py            # 10^5 and 10^6 events
    python benchmarks/bench_encode.py --quick    # 10^4 and 10^5 events
    python benchmarks/bench_encode.py --against main   # this tree against another commit

With ``--against REF`` the same files are loaded and encoded by this tree and by the
``seqmine`` package of git commit REF (exported to a temporary folder), alternating
(new, old, new, old, ...) ``--repeats`` times, each run in a fresh subprocess with the
defaults of its version; the table gives median wall and CPU seconds of each and their
ratio, with the load average beside them, and is written to
benchmarks/results/encode_against.json.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tarfile
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
import warnings
warnings.simplefilter("ignore")
path, stage = sys.argv[1], sys.argv[2]
t0 = time.perf_counter()
c0 = time.process_time()
if stage == "read_csv":
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    n = len(df)
elif stage == "load":
    res = load_events(path)
    n = res.n_kept
else:
    res = load_events(path)
    t1 = time.perf_counter()
    c1 = time.process_time()
    db = Encoder().fit_transform(res.events)
    n = db.n_tokens
    t0, c0 = t1, c1
dt = time.perf_counter() - t0
cpu = time.process_time() - c0
print(json.dumps({{"seconds": dt, "cpu_seconds": cpu, "n": n,
                  "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}}))
'''


def run_stage(path, stage, root=ROOT):
    code = STAGE.format(root=str(root))
    out = subprocess.run([sys.executable, "-c", code, str(path), stage], check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def export_tree(ref, folder):
    """The ``seqmine`` package of git commit ``ref``, unpacked into ``folder``."""
    Path(folder).mkdir(parents=True, exist_ok=True)
    archive = Path(folder) / "old.tar"
    subprocess.run(["git", "-C", str(ROOT), "archive", "--format=tar", "-o", str(archive),
                    ref, "seqmine"], check=True)
    with tarfile.open(archive) as tar:
        tar.extractall(folder, filter="data") if sys.version_info >= (3, 12) else tar.extractall(folder)
    return Path(folder)


def against(ref, sizes, repeats):
    """This tree against commit ``ref``: load and encode, alternating runs."""
    from seqmine.demo_data import write_greenhouse
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        old_root = export_tree(ref, Path(tmp) / "old")
        for n_learners in sizes:
            paths = write_greenhouse(Path(tmp) / f"g{n_learners}", n_learners, seed=7)
            runs = {(tree, stage): [] for tree in ("new", "old") for stage in ("load", "encode")}
            loads = []
            for _ in range(repeats):
                for tree, root in (("new", ROOT), ("old", old_root)):
                    for stage in ("load", "encode"):
                        loads.append(os.getloadavg()[0])
                        runs[(tree, stage)].append(run_stage(paths["events"], stage, root))
            row = {"learners": n_learners, "events": None, "repeats": repeats,
                   "load_average_1min": round(statistics.median(loads), 2)}
            for stage in ("load", "encode"):
                for tree in ("new", "old"):
                    r = runs[(tree, stage)]
                    row[f"{stage}_{tree}_s"] = round(statistics.median(x["seconds"] for x in r), 3)
                    row[f"{stage}_{tree}_cpu_s"] = round(
                        statistics.median(x["cpu_seconds"] for x in r), 3)
                    row[f"{stage}_{tree}_peak_mb"] = round(max(x["peak_mb"] for x in r), 1)
                row[f"{stage}_cpu_ratio_new_old"] = round(
                    row[f"{stage}_new_cpu_s"] / row[f"{stage}_old_cpu_s"], 2)
            row["events"] = runs[("new", "load")][0]["n"]
            row["tokens_new"] = runs[("new", "encode")][0]["n"]
            row["tokens_old"] = runs[("old", "encode")][0]["n"]
            rows.append(row)
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--against", metavar="REF", default=None,
                    help="compare with the seqmine package of this git commit")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    if args.against:
        sizes = [100, 1_000] if args.quick else [1_000, 10_000]
        rows = against(args.against, sizes, args.repeats)
        cols = list(rows[0])
        print(" | ".join(cols))
        for r in rows:
            print(" | ".join(str(r[c]) for c in cols))
        (HERE / "results").mkdir(exist_ok=True)
        (HERE / "results" / "encode_against.json").write_text(
            json.dumps({"against": args.against, "rows": rows}, indent=2) + "\n")
        return 0
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
