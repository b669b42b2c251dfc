"""Benchmark of the phases stage: fitting time on demo-like data and 100,000-token groups.

Run from the repository root::

    python benchmarks/bench_phases.py            # full run
    python benchmarks/bench_phases.py --quick    # smaller, for a smoke test

Writes ``benchmarks/results/phases.json``. Data are sampled from invented greenhouse
HMMs (two outcome groups with different transition structure), so every figure is
reproducible with the seed. Timings are wall-clock on whatever else the machine is
running; the load average at start and end is recorded beside them.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from seqmine._util.progress import quiet_mode  # noqa: E402
from seqmine.encoding.sequences import SequenceDB  # noqa: E402
from seqmine.phases import (  # noqa: E402
    GroupHMMClassifier,
    PhaseModel,
    _hmm,  # noqa: E402
    fit_phase_model,
    fit_phases,
)

ACTIONS = ["add_seedling", "set_light", "set_water", "set_temperature", "advance_week",
           "measure_height", "measure_leaves", "open_chart", "paint_pot", "reset",
           "open_guide", "pause:short", "pause:medium", "pause:long"]


def greenhouse_generators(seed=0):
    """Two invented 4-state generators over the greenhouse vocabulary."""
    rng = np.random.default_rng(seed)
    M = len(ACTIONS)
    B = np.full((4, M), 0.01)
    B[0, [1, 2, 3]] = [0.3, 0.3, 0.2]           # set up
    B[1, [4, 5, 6, 13]] = [0.3, 0.3, 0.2, 0.15]  # advance, measure, pause
    B[2, [7, 10, 12]] = [0.4, 0.3, 0.2]          # chart / guide
    B[3, [8, 9, 11]] = [0.4, 0.3, 0.2]           # paint / reset bursts
    B /= B.sum(axis=1, keepdims=True)
    A_strong = np.array([[.6, .3, .05, .05], [.1, .6, .25, .05], [.3, .1, .55, .05],
                         [.3, .1, .1, .5]])
    A_weak = np.array([[.5, .15, .05, .3], [.2, .45, .05, .3], [.2, .1, .5, .2],
                       [.2, .1, .05, .65]])
    pi = np.array([.7, .1, .1, .1])
    _ = rng
    return (PhaseModel.from_parameters(pi, A_strong, B, ACTIONS, label="strong"),
            PhaseModel.from_parameters(pi, A_weak, B, ACTIONS, label="weak"))


def make_db(n_per_group, mean_length, seed):
    rng = np.random.default_rng(seed)
    seqs, groups = [], []
    for k, gen in enumerate(greenhouse_generators()):
        lengths = np.maximum(rng.poisson(mean_length, size=n_per_group), 2)
        X, _ = gen.sample(lengths, random_state=seed + 1 + k)
        off = np.concatenate([[0], np.cumsum(lengths)])
        seqs += [[ACTIONS[t] for t in X[off[i]:off[i + 1]]] for i in range(n_per_group)]
        groups += [gen.label] * n_per_group
    return SequenceDB.from_lists(seqs, groups=groups, vocab=ACTIONS,
                                 pause_tokens=[a for a in ACTIONS if a.startswith("pause:")])


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def main(argv=None):
    with quiet_mode():
        return _main(argv)


def _main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller data (smoke test)")
    ap.add_argument("--out", default=str(Path(__file__).with_name("results") / "phases.json"))
    args = ap.parse_args(argv)
    results = {"python": platform.python_version(), "machine": platform.machine(),
               "cpu_count": os.cpu_count(), "quick": args.quick,
               "load_average_at_start": list(os.getloadavg()), "runs": {}}
    runs = results["runs"]

    # ---- demo-like: a few hundred learners, ~100 tokens each
    n_demo = 60 if args.quick else 150
    demo = make_db(n_demo, 100, seed=1)
    print(f"demo-like data: {demo.n_sequences} learners, {demo.n_tokens} tokens")
    res, t = timed(lambda: fit_phases(demo, n_states="2-6", n_restarts=5, random_state=0, n_jobs=1,
                                      n_splits=3, n_permutations=19))
    runs["demo_fit_phases_defaults"] = {
        "learners": demo.n_sequences, "tokens": demo.n_tokens, "seconds": t,
        "chosen_states": res.n_states, "settings": "states 2-6, 5 restarts, 3 folds, 19 permutations"}
    print(f"  fit_phases (defaults, serial): {t:.1f} s, chose {res.n_states} states")
    res2, t2 = timed(lambda: fit_phases(demo, n_states="2-6", n_restarts=5, random_state=0, n_jobs=2,
                                        n_splits=3, n_permutations=19))
    same = all(res.models[k].equals(res2.models[k]) for k in res.models)
    runs["demo_fit_phases_jobs2"] = {"seconds": t2, "speedup": t / t2, "identical": same}
    print(f"  fit_phases (n_jobs=2): {t2:.1f} s (x{t / t2:.2f}), identical={same}")
    _, t3 = timed(lambda: fit_phases(demo, n_states="2-6", n_restarts=5, random_state=0, n_splits=0,
                                     n_permutations=0))
    runs["demo_fit_phases_no_cv_no_perm"] = {"seconds": t3}
    print(f"  fit_phases without held-out folds and permutations: {t3:.1f} s")

    # ---- 100,000-token groups
    n_big = 200 if args.quick else 1000
    big = make_db(n_big, 100, seed=2)
    strong = big.subset(np.flatnonzero(big.groups == 0))
    print(f"large groups: {big.n_tokens} tokens ({strong.n_tokens} in one group, "
          f"{strong.n_sequences} sequences)")
    m, t = timed(lambda: fit_phase_model(strong, n_states=4, n_restarts=5, random_state=0))
    runs["group_100k_fit_4_states_5_restarts"] = {
        "tokens": strong.n_tokens, "sequences": strong.n_sequences, "seconds": t,
        "seconds_per_restart": t / 5, "em_iterations_best": m.info["n_iter"]}
    print(f"  one group, 4 states, 5 restarts: {t:.1f} s ({t / 5:.2f} s per restart)")
    m2, t2 = timed(lambda: fit_phase_model(strong, n_states=4, n_restarts=5, random_state=0, n_jobs=2))
    runs["group_100k_fit_jobs2"] = {"seconds": t2, "speedup": t / t2,
                                    "identical": m.equals(m2)}
    print(f"  same with n_jobs=2: {t2:.1f} s (x{t / t2:.2f}), identical={m.equals(m2)}")
    res, t = timed(lambda: fit_phases(big, n_states="2-6", n_restarts=3, random_state=0, n_jobs=2,
                                      n_splits=0, n_permutations=0))
    runs["two_groups_100k_fit_phases"] = {
        "tokens": big.n_tokens, "seconds": t, "chosen_states": res.n_states,
        "settings": "states 2-6, 3 restarts, no folds, no permutations, n_jobs=2"}
    print(f"  fit_phases on both groups (2-6 states, 3 restarts, 2 jobs): {t:.1f} s, "
          f"chose {res.n_states} states")

    # ---- scoring: our batched forward pass against hmmlearn's score, same model
    X, lengths = strong.tokens.astype(np.int64), strong.lengths
    ours, t_ours = timed(lambda: m.score(strong))
    hm = _hmm._hmm_from(m.startprob, m.transmat, m.emissionprob)
    ref, t_ref = timed(lambda: hm.score(X.reshape(-1, 1), lengths))
    runs["scoring_100k_tokens"] = {
        "ours_seconds": t_ours, "hmmlearn_seconds": t_ref, "ratio": t_ref / t_ours,
        "max_abs_difference": abs(ours - ref)}
    print(f"  log-likelihood of {len(X)} tokens: ours {t_ours * 1000:.1f} ms, hmmlearn "
          f"{t_ref * 1000:.1f} ms (x{t_ref / t_ours:.1f}), |diff| {abs(ours - ref):.2e}")
    clf, t = timed(lambda: GroupHMMClassifier(n_states=4, n_restarts=3, random_state=0).fit(big))
    part = big.cut(0.3)
    _, tp = timed(lambda: clf.predict_proba(part))
    acc = float((clf.predict(part) == np.array(big.group_names)[big.groups]).mean())
    runs["classifier_100k_groups"] = {"fit_seconds": t, "predict_seconds_30pct": tp,
                                      "accuracy_first_30pct": acc}
    print(f"  classifier fit {t:.1f} s; predict on first 30% of {big.n_sequences} sequences "
          f"{tp * 1000:.0f} ms, accuracy {acc:.3f}")

    results["load_average_at_end"] = list(os.getloadavg())
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(results, indent=1, sort_keys=True), encoding="utf-8")
    print(f"results written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
