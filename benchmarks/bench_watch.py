"""Live watcher throughput and per-event latency, side by side with a plain pass.

Events: a generated greenhouse log (interleaved across learners, ISO 8601 times) as
JSON lines. Detectors, matched with max_gap=2 and skip_pauses over the default
encoding fitted on the log (three quantile pause bins, shortest implicit):

* ``random``: 10, 100 and 1,000 patterns of length 1-4 drawn with a fixed seed from
  the log's action symbols and pause tokens (first item an action);
* ``mined``: the 10, 100 and 1,000 most frequent patterns (length 2-4) the miner finds
  on the same log with the same constraints -- these fire far more often, as real
  detectors built from frequent patterns do.

For each detector count, one process (one core) runs:

* ``plain``: ``json.loads`` of every line plus reading learner, time and action;
* ``watch``: ``json.loads`` of every line plus ``Watcher.process`` (the full
  ``seqmine watch`` path minus output formatting);
* ``process only``: ``Watcher.process`` on pre-parsed dicts;
* latency: CPU time (``time.thread_time_ns``) of parse + process for each event, p50
  and p99 over all events; wall-clock percentiles are recorded too (on a shared
  machine they include preemption).

Prints a table and writes benchmarks/results/watch.json.

    python benchmarks/bench_watch.py            # 300 learners (~30,000 events)
    python benchmarks/bench_watch.py --learners 2000
"""

from __future__ import annotations

import argparse
import json
import platform
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from seqmine.demo_data import generate_greenhouse  # noqa: E402
from seqmine.detection.watcher import Watcher  # noqa: E402
from seqmine.encoding.encoder import Encoder  # noqa: E402
from seqmine.mining.miner import mine  # noqa: E402


def make_detectors(encoding, vocab, n, seed):
    rng = np.random.default_rng(seed)
    labels = encoding["pause"]["labels"]
    implicit = set(encoding["pause"]["implicit"])
    pauses = ["pause:" + lab for lab in labels if lab not in implicit]
    actions = [v for v in vocab if not v.startswith("pause:")]
    alphabet = actions + pauses
    dets, seen = [], set()
    while len(dets) < n:
        k = int(rng.integers(1, 5))
        # patterns start with an action (as mined detectors usually do)
        toks = [actions[int(rng.integers(len(actions)))]]
        toks += [alphabet[int(rng.integers(len(alphabet)))] for _ in range(k - 1)]
        if tuple(toks) in seen:
            continue
        seen.add(tuple(toks))
        dets.append({"id": f"D{len(dets) + 1:04d}", "tokens": toks,
                     "direction": "discourage" if rng.random() < 0.6 else "encourage",
                     "priority": int(rng.integers(1, 4)),
                     "evidence": {"effects": {"cohens_h": float(rng.normal(0, 0.5))}},
                     "hint": "benchmark"})
    return {"format": "seqmine-detectors", "version": 1, "encoding": encoding,
            "vocabulary": actions,
            "matching": {"max_gap": 2, "max_window": None, "skip_pauses": True},
            "detectors": dets}


def mined_detectors(doc_random, db, n):
    ps = mine(db, min_support=0.01, min_length=2, max_length=4, max_gap=2, skip_pauses=True,
              max_patterns=10 ** 6)
    support = ps.support_counts.sum(axis=1)
    order = sorted(range(ps.n_patterns), key=lambda i: (-support[i], ps.patterns[i]))[:n]
    dets = []
    for k, i in enumerate(order):
        dets.append({"id": f"M{k + 1:04d}", "tokens": [db.vocab[t] for t in ps.patterns[i]],
                     "direction": "discourage" if k % 3 else "encourage",
                     "priority": 1 + k % 3, "hint": "benchmark"})
    return dict(doc_random, detectors=dets)


def plain_pass(lines):
    loads = json.loads
    n = 0
    for line in lines:
        e = loads(line)
        if e["learner"] and e["time"] and e["action"]:
            n += 1
    return n


def watch_pass(lines, doc, parse=True):
    w = Watcher(doc, cooldown_seconds=60, idle_timeout=None)
    loads = json.loads
    process = w.process
    n = 0
    if parse:
        for line in lines:
            n += len(process(loads(line)))
    else:
        for e in lines:
            n += len(process(e))
    return n, w


def latency_pass(lines, doc):
    """Per-event CPU time (thread clock) and wall time of parse + process, in ns.

    The machine may be shared: wall-clock percentiles then include time the process
    was not running (preemption), so the CPU-time percentiles are the primary figure.
    """
    w = Watcher(doc, cooldown_seconds=60, idle_timeout=None)
    loads = json.loads
    process = w.process
    cpu = time.thread_time_ns
    wall = time.perf_counter_ns
    out_cpu = np.empty(len(lines), dtype=np.int64)
    out_wall = np.empty(len(lines), dtype=np.int64)
    for i, line in enumerate(lines):
        w0 = wall()
        c0 = cpu()
        process(loads(line))
        out_cpu[i] = cpu() - c0
        out_wall[i] = wall() - w0
    return out_cpu, out_wall


def timed(fn, *args, repeat=3):
    best = float("inf")
    result = None
    for _ in range(repeat):
        c0 = time.process_time()
        result = fn(*args)
        best = min(best, time.process_time() - c0)
    return best, result


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--learners", type=int, default=300)
    ap.add_argument("--detectors", default="10,100,1000")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--out", default=str(HERE / "results" / "watch.json"))
    args = ap.parse_args(argv)

    data = generate_greenhouse(n_learners=args.learners, random_state=args.seed)
    events = data.events.copy()
    if str(events["time"].dtype).startswith("datetime"):
        events["time"] = events["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    records = events.to_dict("records")
    lines = [json.dumps(r) for r in records]
    parsed = [json.loads(x) for x in lines]
    from seqmine.inputs.load import parse_times
    secs, _r, _k = parse_times(events["time"].to_numpy(object))
    frame = events.assign(time=secs)
    enc = Encoder().fit(frame)
    doc_base = enc.encoding_
    db = enc.transform(frame)
    n = len(lines)
    t_plain, _ = timed(plain_pass, lines, repeat=args.repeat)
    rows = []
    print(f"{n} events, {args.learners} learners, {db.n_tokens} tokens; one core "
          f"(CPU time, best of {args.repeat})")
    print(f"{'set':>6} {'detectors':>9} {'nodes':>6} {'plain ev/s':>11} {'watch ev/s':>11} "
          f"{'process ev/s':>12} {'ratio':>6} {'p50 us':>7} {'p99 us':>7} {'firings':>8}")
    for kind in ("random", "mined"):
        for k in [int(x) for x in args.detectors.split(",")]:
            doc = make_detectors(doc_base, db.vocab, k, args.seed)
            if kind == "mined":
                doc = mined_detectors(doc, db, k)
            t_watch, (n_fire, w) = timed(watch_pass, lines, doc, repeat=args.repeat)
            t_proc, _ = timed(watch_pass, parsed, doc, False, repeat=args.repeat)
            lat, lat_wall = latency_pass(lines, doc)
            row = {
                "detector_set": kind, "detectors": len(doc["detectors"]),
                "trie_nodes": w.n_nodes_, "events": n,
                "plain_events_per_s": round(n / t_plain),
                "watch_events_per_s": round(n / t_watch),
                "process_only_events_per_s": round(n / t_proc),
                "watch_vs_plain_time_ratio": round(t_watch / t_plain, 2),
                "latency_p50_us": round(float(np.percentile(lat, 50)) / 1000, 2),
                "latency_p99_us": round(float(np.percentile(lat, 99)) / 1000, 2),
                "wall_latency_p50_us": round(float(np.percentile(lat_wall, 50)) / 1000, 2),
                "wall_latency_p99_us": round(float(np.percentile(lat_wall, 99)) / 1000, 2),
                "firings": int(n_fire),
            }
            rows.append(row)
            print(f"{kind:>6} {row['detectors']:>9} {row['trie_nodes']:>6} "
                  f"{row['plain_events_per_s']:>11,} {row['watch_events_per_s']:>11,} "
                  f"{row['process_only_events_per_s']:>12,} {row['watch_vs_plain_time_ratio']:>6} "
                  f"{row['latency_p50_us']:>7} {row['latency_p99_us']:>7} {row['firings']:>8,}")
    result = {"benchmark": "watch", "python": platform.python_version(),
              "machine": platform.machine(), "learners": args.learners, "events": n,
              "matching": {"max_gap": 2, "max_window": None, "skip_pauses": True},
              "timing": f"CPU time of one process, best of {args.repeat}; latency: per-event "
                        f"CPU time (thread clock), wall clock alongside", "rows": rows}
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
