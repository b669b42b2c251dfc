"""Cost of the Westfall-Young permutation test, against a naive per-pattern loop.

Run from the repository root::

    python benchmarks/bench_permutation.py          # 10,000 learners x 10,000 patterns
                                                    # x 1,000 permutations
    python benchmarks/bench_permutation.py --quick    # 2,000 x 2,000 x 200, a few seconds

All methods run in the same process on the same data: the vectorised test on the
full problem; on small slices, the naive loop (per permutation and pattern: mask the
column, count, one scipy.stats.fisher_exact call) and a semi-naive variant (counts
from one sparse product per permutation, scipy Fisher per pattern). Ratios compare
cost per (pattern x permutation). Results go to
``benchmarks/results/permutation.json`` (``permutation_quick.json`` with ``--quick``,
or ``--out``).
"""

from __future__ import annotations

import argparse
import json
import platform
import resource
import sys
import time
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from seqmine._util.progress import quiet_mode  # noqa: E402
from seqmine.mining.patterns import PatternSet  # noqa: E402
from seqmine.scoring.contrast import contrast  # noqa: E402
from seqmine.scoring.permutation import westfall_young_minp, westfall_young_rates  # noqa: E402


def synthetic_presence(n_learners, n_patterns, seed):
    """Sparse presence with mined-like supports: many patterns near the support
    threshold, a long tail of common ones (support = 0.02 + 0.78 * Beta(0.8, 3))."""
    rng = np.random.default_rng(seed)
    support = 0.02 + 0.78 * rng.beta(0.8, 3.0, n_patterns)
    rows, cols = [], []
    chunk = max(1, 4_000_000 // n_learners)
    for s in range(0, n_patterns, chunk):
        sup = support[s: s + chunk]
        block = rng.random((n_learners, len(sup)), dtype=np.float32) < sup[None, :]
        r, c = np.nonzero(block)
        rows.append(r)
        cols.append(c + s)
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    counts = sp.csr_matrix((np.ones(len(rows), dtype=np.int64), (rows, cols)),
                           shape=(n_learners, n_patterns))
    labels = rng.permutation(np.arange(n_learners) % 2)
    return counts, labels


def sequence_rates_matrix(counts):
    """Rates per 100 tokens for synthetic sequences of 40 to 160 tokens."""
    rng = np.random.default_rng(1)
    lengths = rng.integers(40, 161, counts.shape[0]).astype(np.float64)
    rates = sp.csr_matrix(counts, dtype=np.float64, copy=True)
    rows = np.repeat(np.arange(counts.shape[0]), np.diff(rates.indptr))
    rates.data = rates.data * rng.integers(1, 4, len(rates.data)) / lengths[rows] * 100
    return rates


def naive_minp_unit_cost(presence_dense, labels, n_perm, seed):
    """Seconds per (pattern x permutation) of a per-pattern Python loop with scipy."""
    rng = np.random.default_rng(seed)
    n1 = int((labels == 0).sum())
    n2 = len(labels) - n1
    m = presence_dense.shape[1]
    t0 = time.perf_counter()
    for _ in range(n_perm):
        perm = rng.permutation(labels)
        for j in range(m):
            col = presence_dense[:, j]
            a = int(col[perm == 0].sum())
            c = int(col[perm == 1].sum())
            stats.fisher_exact([[a, n1 - a], [c, n2 - c]])
    return (time.perf_counter() - t0) / (n_perm * m)


def _peak_mb():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def semi_naive_unit_cost(counts, labels, n_patterns, n_perm, seed):
    """Seconds per (pattern x permutation) when the group counts come from one sparse
    product per permutation but each p-value is still a scipy.stats.fisher_exact call."""
    rng = np.random.default_rng(seed)
    n_patterns = min(n_patterns, counts.shape[1])
    pt = (counts[:, :n_patterns] > 0).astype(np.float32).T.tocsr()
    n1 = int((labels == 0).sum())
    n2 = len(labels) - n1
    total = np.asarray(pt.sum(axis=1)).ravel()
    t0 = time.perf_counter()
    for _ in range(n_perm):
        perm = rng.permutation(labels)
        a = np.rint(pt @ (perm == 0).astype(np.float32)).astype(int)
        c = total - a
        for j in range(n_patterns):
            stats.fisher_exact([[a[j], n1 - a[j]], [c[j], n2 - c[j]]])
    return (time.perf_counter() - t0) / (n_perm * n_patterns)


def main(argv=None):
    with quiet_mode():
        return _main(argv)


def _main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small problem (seconds)")
    parser.add_argument("--learners", type=int, default=None)
    parser.add_argument("--patterns", type=int, default=None)
    parser.add_argument("--permutations", type=int, default=None)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--skip-contrast", action="store_true",
                        help="time only the permutation test, not the whole contrast table")
    parser.add_argument("--out", default=None,
                        help="result file (default benchmarks/results/permutation.json, "
                             "permutation_quick.json with --quick)")
    args = parser.parse_args(argv)
    n = args.learners or (2_000 if args.quick else 10_000)
    m = args.patterns or (2_000 if args.quick else 10_000)
    b = args.permutations or (200 if args.quick else 1_000)

    t0 = time.perf_counter()
    counts, labels = synthetic_presence(n, m, args.seed)
    gen_s = time.perf_counter() - t0
    density = counts.nnz / (n * m)
    print(f"data: {n} learners x {m} patterns, presence density {density:.3f} "
          f"({counts.nnz:,} non-zeros), generated in {gen_s:.1f} s", flush=True)

    t0 = time.perf_counter()
    raw, adj = westfall_young_minp(counts, labels, n_permutations=b, random_state=args.seed)
    wy_s = time.perf_counter() - t0
    unit_fast = wy_s / (m * b)
    rss_wy = _peak_mb()
    print(f"Westfall-Young min-P, {b} permutations: {wy_s:.2f} s "
          f"({unit_fast * 1e9:.1f} ns per pattern x permutation)", flush=True)

    t0 = time.perf_counter()
    westfall_young_rates(sequence_rates_matrix(counts), labels, n_permutations=b,
                         random_state=args.seed)
    wy_rates_s = time.perf_counter() - t0
    print(f"Westfall-Young min-P on the rank test of rates, {b} permutations: "
          f"{wy_rates_s:.2f} s", flush=True)

    slice_m, slice_b = min(40, m), 10
    dense = counts[:, :slice_m].toarray()
    unit_naive = naive_minp_unit_cost(dense, labels, slice_b, args.seed)
    ratio = unit_naive / unit_fast
    print(f"naive loop on a {slice_m}-pattern x {slice_b}-permutation slice: "
          f"{unit_naive * 1e6:.1f} us per pattern x permutation -> ratio {ratio:,.0f}x; "
          f"the naive loop would take about {unit_naive * m * b / 3600:.1f} h on the full "
          f"problem", flush=True)

    semi_m = min(400, m)
    unit_semi = semi_naive_unit_cost(counts, labels, semi_m, 5, args.seed)
    print(f"semi-naive (sparse product per permutation, scipy Fisher per pattern) on {semi_m} "
          f"patterns x 5 permutations: {unit_semi * 1e6:.1f} us per pattern x permutation -> "
          f"ratio {unit_semi / unit_fast:,.0f}x", flush=True)

    result = {
        "benchmark": "permutation", "mode": "quick" if args.quick else "full",
        "learners": n, "patterns": m, "permutations": b, "presence_density": density,
        "nonzeros": int(counts.nnz), "westfall_young_seconds": wy_s,
        "ns_per_pattern_permutation": unit_fast * 1e9,
        "naive_slice": {"patterns": slice_m, "permutations": slice_b,
                        "us_per_pattern_permutation": unit_naive * 1e6},
        "speedup_vs_naive": ratio,
        "semi_naive_slice": {"patterns": semi_m, "permutations": 5,
                             "us_per_pattern_permutation": unit_semi * 1e6},
        "speedup_vs_semi_naive": unit_semi / unit_fast,
        "naive_extrapolated_hours": unit_naive * m * b / 3600,
        "significant_patterns_fwer_0.05": int((adj <= 0.05).sum()),
        "westfall_young_rates_seconds": wy_rates_s,
        "peak_rss_mb_after_data_and_permutation_test": rss_wy,
    }
    if not args.skip_contrast:
        ps = PatternSet(patterns=[(j,) for j in range(m)], vocab=[f"p{j}" for j in range(m)],
                        is_pause=np.zeros(m, bool), group_names=["strong", "weak"],
                        group_sizes=np.bincount(labels, minlength=2),
                        support_counts=np.zeros((m, 2), np.int64), counts=counts,
                        seq_groups=labels)
        lengths = np.full(n, 100)
        t0 = time.perf_counter()
        contrast(ps, lengths=lengths, correction="bh", n_bootstrap=100,
                 redundancy=None)
        bh_s = time.perf_counter() - t0
        print(f"whole contrast table (Fisher, Mann-Whitney, effect sizes, BH, 100 bootstrap "
              f"resamples, no redundancy pass): {bh_s:.2f} s", flush=True)
        result["contrast_bh_stability100_seconds"] = bh_s
        sub = ps.select(np.arange(min(m, 2_000)))
        t0 = time.perf_counter()
        contrast(sub, lengths=lengths, correction="bh", n_bootstrap=0, redundancy=0.9)
        red_s = time.perf_counter() - t0
        print(f"contrast with redundancy pass on {sub.n_patterns} patterns: {red_s:.2f} s",
              flush=True)
        result["contrast_redundancy_seconds"] = {"patterns": sub.n_patterns, "seconds": red_s}
    peak = _peak_mb()
    print(f"peak resident memory: {rss_wy:.0f} MB after data + permutation test, "
          f"{peak:.0f} MB at the end")
    result.update({
        "peak_rss_mb": peak, "python": platform.python_version(), "numpy": np.__version__,
        "scipy": scipy.__version__, "machine": platform.machine(),
        "cpus": __import__("os").cpu_count(),
    })
    out = Path(args.out) if args.out else (
        Path(__file__).parent / "results"
        / ("permutation_quick.json" if args.quick else "permutation.json"))
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    print(f"results written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
