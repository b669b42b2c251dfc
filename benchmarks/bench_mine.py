"""Benchmark of the pattern miner: speed against a reference package, scaling, memory.

Run from the repository root::

    python benchmarks/bench_mine.py            # full run (a few minutes)
    python benchmarks/bench_mine.py --quick    # tiny sizes, seconds

Writes ``benchmarks/results/mine.json`` and prints a table. Every measurement runs
in a fresh subprocess, so the peak memory (``ru_maxrss``) belongs to that one run.

Data: demo-scenario sequences (virtual greenhouse actions with pause tokens) from a
seeded Markov generator with two outcome groups whose transition matrices differ;
60-150 events per learner plus pause tokens (about 100-200 tokens a sequence).

1. *Reference comparison* (about 1e4 and 1e5 tokens, groups pooled, no constraints,
   maximum length 4, minimum support 30 % as a count): the ``prefixspan`` package
   (PyPI 0.5.2, pure Python; a test/benchmark reference only) against ``mine`` with
   identical output (patterns and supports; ``instance_counts=False``) -- outputs are
   checked equal -- and against ``mine`` with its full output (per-group supports and
   the sequences x patterns instance-count matrix) for information.
2. *Scaling* at 1e5, 1e6, 1e7 tokens at fixed relative support, two groups:
   (a) no constraints, patterns and supports; (b) a typical constrained run
   (``max_gap=1, skip_pauses=True``, minimum support 10 %) with instance counts
   (1e7 only with ``--large``).
   Reported: time, patterns, projected occurrences per second, peak memory, and the
   multiple of a single pass over the tokens (``np.bincount``).

All times are wall-clock seconds (CPU seconds beside them): the machine may be
shared, so compare the columns of one run rather than runs on different days.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

ACTIONS = ["add_seedling", "set_light", "set_water", "set_temperature", "advance_week",
           "measure_height", "measure_leaves", "open_chart", "paint_pot", "reset", "open_guide"]
PAUSES = ["pause:medium", "pause:long"]
SEED = 20261202


# ------------------------------------------------------------------ data
#: The unconstrained miner the reference package implements (any gap, pauses count,
#: single items reported); the product defaults are contiguous patterns of 2-4 items.
UNCONSTRAINED = dict(min_length=1, max_gap=None, skip_pauses=False, start_with_action=False)


def generate(n_tokens, seed=SEED):
    """Demo-like token arrays: (tokens int16, lengths, groups 0/1)."""
    rng = np.random.default_rng(seed)
    n_act = len(ACTIONS)
    # transition matrices of the two groups share a base and differ a little
    base = rng.dirichlet(np.full(n_act, 0.6), size=n_act)
    mats = []
    for _ in range(2):
        m = 0.75 * base + 0.25 * rng.dirichlet(np.full(n_act, 0.6), size=n_act)
        mats.append(np.cumsum(m / m.sum(axis=1, keepdims=True), axis=1))
    cum = np.stack(mats)
    pause_p = np.array([0.35, 0.2])                        # chance of a pause after an event
    mean_tokens = 105 * (1 + pause_p.mean())
    n_seq = max(2, int(round(n_tokens / mean_tokens)))
    n_events = rng.integers(60, 151, n_seq)
    groups = rng.integers(0, 2, n_seq)
    L = int(n_events.max())
    ev = np.zeros((n_seq, L), dtype=np.int16)
    cur = rng.integers(0, n_act, n_seq)
    ev[:, 0] = cur
    for t in range(1, L):
        u = rng.random(n_seq)
        cur = np.minimum((u[:, None] > cum[groups, cur]).sum(axis=1), n_act - 1)
        ev[:, t] = cur
    # a pause token (medium or long) after some events, never after the last one
    u = rng.random((n_seq, L))
    pause = np.where(u < pause_p[groups][:, None] * 0.6, n_act,
                     np.where(u < pause_p[groups][:, None], n_act + 1, -1))
    pause[np.arange(L)[None, :] >= (n_events - 1)[:, None]] = -1
    inter = np.stack([ev.astype(np.int16), pause.astype(np.int16)], axis=2).reshape(n_seq, 2 * L)
    valid = np.zeros((n_seq, 2 * L), dtype=bool)
    valid[:, 0::2] = np.arange(L)[None, :] < n_events[:, None]
    valid[:, 1::2] = pause >= 0
    tokens = inter[valid]
    lengths = valid.sum(axis=1)
    return tokens, lengths, groups


def make_db(tokens, lengths, groups, grouped):
    from seqmine.encoding.sequences import SequenceDB

    vocab = ACTIONS + PAUSES
    n = len(lengths)
    off = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(lengths, out=off[1:])
    return SequenceDB(
        tokens=tokens, offsets=off, vocab=vocab,
        is_pause=np.array([v in PAUSES for v in vocab]),
        times=np.zeros(len(tokens)), source_rows=np.arange(1, len(tokens) + 1),
        learners=np.array([f"L{i}" for i in range(n)], dtype=object),
        sessions=np.array([""] * n, dtype=object),
        groups=groups if grouped else np.full(n, -1),
        group_names=["strong", "weak"] if grouped else [])


# --------------------------------------------------------------- workers
def _timed(fn):
    w, c = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w, time.process_time() - c


def _processed(stats):
    """Prefix occurrences extended + new occurrences found + instance counts computed."""
    lv = stats.get("levels", [])
    return int(sum(x.get("occurrences_extended", 0) + x.get("occurrences_kept", 0)
                   for x in lv) + stats.get("instance_counts", 0))


def worker_reference(spec):
    from prefixspan import PrefixSpan

    from seqmine.mining import miner as mine_mod

    tokens, lengths, groups = generate(spec["tokens"])
    db = make_db(tokens, lengths, groups, grouped=False)
    minsup = int(np.ceil(spec["support"] * db.n_sequences))
    seqs = [db.sequence(i).tolist() for i in range(db.n_sequences)]
    res = {"tokens": int(db.n_tokens), "sequences": int(db.n_sequences), "min_count": minsup}
    best = None
    for _ in range(spec["repeats"]):
        ps, w, c = _timed(lambda: mine_mod.mine(db, min_support=minsup, max_length=4,
                                                 instance_counts=False, max_patterns=10 ** 7,
                                                 **UNCONSTRAINED))
        best = (w, c) if best is None or w < best[0] else best
    res["ours_supports_s"], res["ours_supports_cpu_s"] = best
    res["patterns"] = ps.n_patterns
    full, w, c = _timed(lambda: mine_mod.mine(db, min_support=minsup, max_length=4,
                                              max_patterns=10 ** 7, **UNCONSTRAINED))
    res["ours_full_s"], res["ours_full_cpu_s"] = w, c
    res["count_matrix_nonzeros"] = int(full.counts.nnz)

    def reference():
        r = PrefixSpan(seqs)
        r.maxlen = 4
        return r.frequent(minsup)

    ref, w, c = _timed(reference)
    res["reference_s"], res["reference_cpu_s"] = w, c
    ours = {p: int(s) for p, s in zip(ps.patterns, ps.support_counts.sum(axis=1))}
    theirs = {tuple(p): int(s) for s, p in ref}
    res["identical_output"] = ours == theirs
    res["speedup_supports"] = res["reference_s"] / res["ours_supports_s"]
    res["speedup_full"] = res["reference_s"] / res["ours_full_s"]
    res["speedup_supports_cpu"] = res["reference_cpu_s"] / res["ours_supports_cpu_s"]
    res["speedup_full_cpu"] = res["reference_cpu_s"] / res["ours_full_cpu_s"]
    return res


def worker_scaling(spec):
    from seqmine.mining import miner as mine_mod

    tokens, lengths, groups = generate(spec["tokens"])
    db = make_db(tokens, lengths, groups, grouped=True)
    del tokens
    _, floor_w, _ = _timed(lambda: np.bincount(db.tokens, minlength=len(db.vocab)))
    floor_w = min(floor_w, _timed(lambda: np.bincount(db.tokens, minlength=len(db.vocab)))[1])
    kw = dict(UNCONSTRAINED, **spec["options"])
    ps, w, c = _timed(lambda: mine_mod.mine(db, max_length=4, max_patterns=10 ** 7, **kw))
    stats = ps.search_stats
    processed = _processed(stats)
    return {
        "tokens": int(db.n_tokens), "sequences": int(db.n_sequences),
        "seconds": w, "cpu_seconds": c, "patterns": ps.n_patterns,
        "count_matrix_nonzeros": int(ps.counts.nnz),
        "occurrences_processed": processed, "occurrences_per_s": processed / w,
        "floor_bincount_s": floor_w, "multiple_of_floor": w / floor_w,
        "blocks": stats.get("n_blocks"),
    }


def _run_worker(kind, spec):
    env = dict(os.environ, SEQMINE_QUIET="1")
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", kind, json.dumps(spec)]
    out = subprocess.run(cmd, capture_output=True, text=True, env=env, check=False)
    if out.returncode != 0:
        return {"error": out.stderr.strip().splitlines()[-1] if out.stderr else "failed",
                **spec}
    return json.loads(out.stdout.strip().splitlines()[-1])


# ------------------------------------------------------------------ main
def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="tiny sizes (seconds)")
    ap.add_argument("--large", action="store_true",
                    help="also run the constrained configuration at 1e7 tokens (minutes, GBs)")
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "results" / "mine.json"))
    ap.add_argument("--worker", nargs=2, metavar=("KIND", "SPEC"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        kind, spec = args.worker[0], json.loads(args.worker[1])
        res = worker_reference(spec) if kind == "reference" else worker_scaling(spec)
        res["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(json.dumps(res))
        return 0

    ref_sizes = [2_000, 10_000] if args.quick else [10_000, 100_000]
    scale_sizes = [10_000, 100_000] if args.quick else [100_000, 1_000_000, 10_000_000]
    configs = {
        "unconstrained, supports only (min_support 0.3)":
            ({"min_support": 0.3, "instance_counts": False}, scale_sizes),
        "max_gap=1, skip_pauses, instance counts (min_support 0.1)":
            ({"min_support": 0.1, "max_gap": 1, "skip_pauses": True},
             scale_sizes if args.large or args.quick else scale_sizes[:2]),
    }
    results = {"machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                           "platform": platform.platform()},
               "reference": [], "scaling": {}}
    print("== ours vs the prefixspan package (identical output: patterns + supports) ==")
    print("(ratio = reference time / our time, wall clock; CPU-time ratio in brackets)")
    print(f"{'tokens':>9} {'seqs':>6} {'patterns':>8} {'reference s':>11} {'ours s':>8} "
          f"{'ratio':>12} {'ours full s':>11} {'ratio':>11} {'same':>5} {'peak MB':>8}")
    for n in ref_sizes:
        r = _run_worker("reference", {"tokens": n, "support": 0.3, "repeats": 3})
        results["reference"].append(r)
        if "error" in r:
            print(f"{n:>9} error: {r['error']}")
            continue
        print(f"{r['tokens']:>9} {r['sequences']:>6} {r['patterns']:>8} {r['reference_s']:>11.2f} "
              f"{r['ours_supports_s']:>8.3f} {r['speedup_supports']:>4.0f}x "
              f"[{r['speedup_supports_cpu']:>3.0f}x] "
              f"{r['ours_full_s']:>11.3f} {r['speedup_full']:>4.1f}x "
              f"[{r['speedup_full_cpu']:>3.1f}x] "
              f"{str(r['identical_output']):>5} {r['peak_rss_mb']:>8.0f}")
    for name, (opts, sizes) in configs.items():
        print(f"\n== scaling: {name}, max_length 4, two groups ==")
        print(f"{'tokens':>10} {'seqs':>7} {'patterns':>8} {'seconds':>8} {'cpu s':>7} "
              f"{'x prev':>6} {'Mocc/s':>7} {'x floor':>8} {'nnz':>10} {'peak MB':>8}")
        rows = []
        prev = None
        for n in sizes:
            r = _run_worker("scaling", {"tokens": n, "options": opts})
            rows.append(r)
            if "error" in r:
                print(f"{n:>10} error: {r['error']}")
                continue
            growth = f"{r['seconds'] / prev:>5.1f}x" if prev else f"{'':>6}"
            prev = r["seconds"]
            print(f"{r['tokens']:>10} {r['sequences']:>7} {r['patterns']:>8} "
                  f"{r['seconds']:>8.2f} {r['cpu_seconds']:>7.2f} {growth} "
                  f"{r['occurrences_per_s'] / 1e6:>7.1f} {r['multiple_of_floor']:>8.0f} "
                  f"{r['count_matrix_nonzeros']:>10} {r['peak_rss_mb']:>8.0f}")
        results["scaling"][name] = rows
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(results, indent=1), encoding="utf-8")
    print(f"\nresults written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
