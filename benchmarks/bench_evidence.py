"""Cost of the volume-adjusted test, the order test and replication, beside Fisher scoring.

Run from the repository root::

    python benchmarks/bench_evidence.py            # 10,000 learners x 10,000 patterns
    python benchmarks/bench_evidence.py --quick    # 2,000 x 2,000, seconds

Every step runs in the same process on the same synthetic data, one after the other,
so the ratios compare like with like: the existing presence scoring (Fisher exact
p-values of every pattern plus Benjamini-Hochberg), the bootstrap stability step (100
resamples), the new volume-adjusted test (Cochran-Mantel-Haenszel over activity
strata), the new order test (holders of every item, chance bins), split-half
replication (20 splits over the findings, here 30 % of the patterns), and the whole
contrast table with and without the new columns. CPU seconds (``time.process_time``) are reported beside wall seconds, with the
load average before and after. Results go to ``benchmarks/results/evidence.json``
(``evidence_quick.json`` with ``--quick``, or ``--out``).

Data: token counts of 60 token kinds per learner (lengths 40-160 tokens, token shares
from a Dirichlet draw); patterns are random runs of 2-4 tokens (some single tokens);
a pattern can only be present in a learner who holds its items, and is present in a
random 30-90 % of them.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import sys
import time
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from seqmine._util.progress import quiet_mode  # noqa: E402
from seqmine.mining.patterns import PatternSet  # noqa: E402
from seqmine.scoring.adjusted import (  # noqa: E402
    activity_strata,
    cell_counts,
    cmh_from_counts,
    order_tables,
)
from seqmine.scoring.contrast import contrast  # noqa: E402
from seqmine.scoring.multitest import adjust_pvalues  # noqa: E402
from seqmine.scoring.permutation import bootstrap_significance, presence_pvalues  # noqa: E402
from seqmine.scoring.replication import split_half_replication  # noqa: E402


#: Label of the replication step (findings: 30 % of the patterns, half of them order).
REPLICATION_STEP = "replication, 20 splits (30 % findings, half by order test)"


def synthetic(n_learners, n_patterns, seed, n_vocab=60):
    """Token counts, lengths, patterns and a presence matrix consistent with them."""
    rng = np.random.default_rng(seed)
    lengths = rng.integers(40, 161, n_learners)
    shares = rng.dirichlet(np.full(n_vocab, 0.7))
    counts = np.stack([rng.multinomial(int(L), shares) for L in lengths])
    k = rng.choice([1, 2, 3, 4], size=n_patterns, p=[0.05, 0.3, 0.35, 0.3])
    patterns = [tuple(int(t) for t in rng.choice(n_vocab, size=int(kk), p=shares))
                for kk in k]
    keep = rng.uniform(0.3, 0.9, n_patterns)
    rows, cols = [], []
    step = max(1, 2_000_000 // n_learners)
    for s in range(0, n_patterns, step):
        block = np.ones((n_learners, min(step, n_patterns - s)), dtype=bool)
        for j, p in enumerate(patterns[s: s + step]):
            need = np.bincount(p, minlength=n_vocab)
            toks = np.flatnonzero(need)
            block[:, j] = np.all(counts[:, toks] >= need[toks], axis=1)
        block &= rng.random(block.shape, dtype=np.float32) < keep[s: s + step]
        r, c = np.nonzero(block)
        rows.append(r)
        cols.append(c + s)
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    presence = sp.csr_matrix((np.ones(len(rows), dtype=np.int64), (rows, cols)),
                             shape=(n_learners, n_patterns))
    labels = rng.permutation(np.arange(n_learners) % 2)
    return sp.csr_matrix(counts), lengths, patterns, presence, labels


class _Clock:
    def __init__(self):
        self.rows = {}

    def __call__(self, name, func):
        w0, c0 = time.perf_counter(), time.process_time()
        out = func()
        self.rows[name] = {"wall_s": round(time.perf_counter() - w0, 3),
                           "cpu_s": round(time.process_time() - c0, 3)}
        print(f"{name:58s} {self.rows[name]['cpu_s']:8.2f} CPU-s "
              f"{self.rows[name]['wall_s']:8.2f} s", flush=True)
        return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="2,000 x 2,000 (seconds)")
    parser.add_argument("--learners", type=int, default=None)
    parser.add_argument("--patterns", type=int, default=None)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--out", default=None)
    args = parser.parse_args(argv)
    n = args.learners or (2_000 if args.quick else 10_000)
    m = args.patterns or (2_000 if args.quick else 10_000)
    load_before = os.getloadavg()
    t0 = time.perf_counter()
    tokens, lengths, patterns, presence, labels = synthetic(n, m, args.seed)
    print(f"data: {n} learners x {m} patterns, presence density "
          f"{presence.nnz / (n * m):.3f}, generated in {time.perf_counter() - t0:.1f} s "
          f"(load average {load_before[0]:.2f})", flush=True)
    clock = _Clock()
    pres = (presence > 0).astype(np.int8).tocsr()
    clock("Fisher presence p-values + BH (existing scoring)",
          lambda: adjust_pvalues(presence_pvalues(pres, labels), "bh"))
    raw_dir = np.where(np.asarray(pres[labels == 0].mean(axis=0)).ravel()
                       > np.asarray(pres[labels == 1].mean(axis=0)).ravel(), 1, -1)
    clock("bootstrap stability, 100 resamples (existing)",
          lambda: bootstrap_significance(pres, labels, raw_dir, n_bootstrap=100))
    volume = lengths.astype(float)
    strata = activity_strata(volume)
    n_s = int(strata.max()) + 1

    def volume_test():
        x = cell_counts(pres, labels, strata, 2, n_s)
        sizes = np.bincount(labels * n_s + strata, minlength=2 * n_s).reshape(2, n_s)
        return adjust_pvalues(cmh_from_counts(x, sizes)[0], "bh")

    clock("volume-adjusted test (CMH over strata) + BH", volume_test)
    multi = [i for i, p in enumerate(patterns) if len(p) >= 2]

    def order_test():
        ((x, el),) = order_tables(pres[:, multi], tokens, lengths,
                                  [patterns[i] for i in multi], [(labels, 2)], n_s)
        return adjust_pvalues(cmh_from_counts(x, el)[0], "bh")

    clock("order test (holders, chance bins, CMH) + BH", order_test)
    # replication runs for findings only: here 30 % of the patterns, half of them order
    # findings (order test in every half), half presence findings (volume-adjusted test)
    rng = np.random.default_rng(1)
    u = rng.random(m)
    kinds = np.where(u < 0.15, "order", np.where(u < 0.3, "volume", ""))
    kinds[(kinds == "order") & np.array([len(p) < 2 for p in patterns])] = "volume"
    dirs = np.zeros(m, dtype=np.int64)
    clock(REPLICATION_STEP,
          lambda: split_half_replication(pres, labels, 2, kinds, dirs, n_splits=20,
                                         strata=strata, token_counts=tokens, lengths=lengths,
                                         patterns=patterns))
    ps = PatternSet(patterns=patterns, vocab=[f"t{j}" for j in range(tokens.shape[1])],
                    is_pause=np.zeros(tokens.shape[1], bool), group_names=["strong", "weak"],
                    group_sizes=np.bincount(labels, minlength=2),
                    support_counts=np.zeros((m, 2), np.int64), counts=presence,
                    seq_groups=labels)
    clock("contrast table, old columns only (lengths, no token counts), 100 resamples",
          lambda: contrast(ps, lengths=lengths, n_bootstrap=100,
                           n_replication_splits=0, redundancy=None))

    # the whole table with every new column needs a database; pass the token counts
    # through the same path contrast() uses
    import seqmine.scoring.contrast as con
    real = con._unit_activity
    con._unit_activity = lambda db, lens, agg: (volume, tokens)
    try:
        clock("contrast table, all columns (volume, order, 20 splits), 100 resamples",
              lambda: contrast(ps, lengths=lengths, n_bootstrap=100,
                               n_replication_splits=20, redundancy=None))
    finally:
        con._unit_activity = real
    load_after = os.getloadavg()
    r = clock.rows
    result = {
        "benchmark": "evidence", "mode": "quick" if args.quick else "full",
        "learners": n, "patterns": m, "presence_density": presence.nnz / (n * m),
        "strata": n_s, "steps": r,
        "ratio_volume_to_fisher_cpu": r["volume-adjusted test (CMH over strata) + BH"]["cpu_s"]
        / max(r["Fisher presence p-values + BH (existing scoring)"]["cpu_s"], 1e-9),
        "ratio_order_to_fisher_cpu": r["order test (holders, chance bins, CMH) + BH"]["cpu_s"]
        / max(r["Fisher presence p-values + BH (existing scoring)"]["cpu_s"], 1e-9),
        "ratio_replication_to_bootstrap_cpu":
            r[REPLICATION_STEP]["cpu_s"]
            / max(r["bootstrap stability, 100 resamples (existing)"]["cpu_s"], 1e-9),
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "load_average_before": load_before, "load_average_after": load_after,
        "python": platform.python_version(), "numpy": np.__version__,
        "scipy": scipy.__version__, "cpus": os.cpu_count(),
    }
    for key in ("ratio_volume_to_fisher_cpu", "ratio_order_to_fisher_cpu",
                "ratio_replication_to_bootstrap_cpu"):
        print(f"{key}: {result[key]:.2f}")
    print(f"peak memory {result['peak_rss_mb']:.0f} MB; load average {load_before[0]:.2f} "
          f"before, {load_after[0]:.2f} after")
    out = Path(args.out) if args.out else (Path(__file__).resolve().parent / "results" /
                                           ("evidence_quick.json" if args.quick
                                            else "evidence.json"))
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=1) + "\n", encoding="utf-8")
    print(f"wrote {out}")


if __name__ == "__main__":
    with quiet_mode():
        main()
