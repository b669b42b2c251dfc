"""Small stand-ins for the grouping, encoder, miner and scorer used by validate tests.

They are plain reference implementations (brute force), kept here so the validation
tests can also run each discovery step in isolation.
"""

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.stats import false_discovery_control, fisher_exact

from seqmine.encoding.sequences import SequenceDB
from seqmine.mining.patterns import PatternSet, format_pattern

ACTIONS = ["set_light", "set_water", "advance_week", "measure_height", "open_chart",
           "paint_pot", "reset"]


class MedianGrouping:
    """Median split of the 'score' column: above the training median = strong."""

    def fit(self, outcomes):
        self.threshold_ = float(np.median(outcomes["score"]))
        self.group_names_ = ["strong", "weak"]
        return self

    def transform(self, outcomes):
        g = np.where(outcomes["score"].to_numpy() > self.threshold_, "strong", "weak")
        return pd.Series(g, index=outcomes["learner"].astype(str).to_numpy())


class QuantileEncoder:
    """Actions plus a 'pause:long' token after gaps above the training 2/3 quantile."""

    def fit(self, events):
        ev = events.sort_values(["learner", "time"], kind="mergesort")
        gaps = ev.groupby("learner")["time"].diff().dropna().to_numpy()
        self.encoding_ = {"pause": {"edges": [float(np.quantile(gaps, 1 / 3)),
                                              float(np.quantile(gaps, 2 / 3))],
                                    "labels": ["short", "medium", "long"]}}
        return self

    def transform(self, events):
        edges = np.array(self.encoding_["pause"]["edges"])
        ev = events.sort_values(["learner", "time"], kind="mergesort")
        seqs, learners, times = [], [], []
        for lr, part in ev.groupby("learner", sort=True):
            acts, t = part["action"].tolist(), part["time"].to_numpy()
            s, ts = [], []
            for i, a in enumerate(acts):
                s.append(a)
                ts.append(t[i])
                if i + 1 < len(acts) and np.searchsorted(edges, t[i + 1] - t[i], side="right") == 2:
                    s.append("pause:long")
                    ts.append(t[i])
            seqs.append(s)
            learners.append(lr)
            times.append(ts)
        db = SequenceDB.from_lists(seqs, learners=learners, pause_tokens=["pause:long"],
                                   vocab=sorted({x for s in seqs for x in s}))
        db.times = np.concatenate(times) if times else np.zeros(0)
        db.encoding = dict(self.encoding_)
        return db


def count_contiguous(seq, pat):
    """Non-overlapping contiguous occurrences, scanned left to right."""
    k, i, c = len(pat), 0, 0
    while i + k <= len(seq):
        if tuple(seq[i:i + k]) == pat:
            c += 1
            i += k
        else:
            i += 1
    return c


def ngram_match(db, patterns, **_):
    """Contiguous matcher (max_gap=0 semantics) by brute force."""
    pats = [tuple(int(t) for t in p) for p in patterns]
    rows = [db.sequence(i).tolist() for i in range(db.n_sequences)]
    counts = np.array([[count_contiguous(s, p) for p in pats] for s in rows], dtype=np.int64)
    counts = counts.reshape(db.n_sequences, len(pats))
    pres = counts > 0
    sup = np.array([[pres[db.groups == g, j].sum() for g in range(db.n_groups)]
                    for j in range(len(pats))], dtype=np.int64).reshape(len(pats), db.n_groups)
    return PatternSet(patterns=pats, vocab=db.vocab, is_pause=db.is_pause,
                      group_names=db.group_names, group_sizes=db.group_sizes(),
                      support_counts=sup, counts=sp.csr_matrix(counts), seq_groups=db.groups)


def ngram_mine(db, *, min_support, min_length=1, max_length=3, **_):
    """All contiguous n-grams frequent in at least one group (brute force)."""
    cands = set()
    for i in range(db.n_sequences):
        s = db.sequence(i).tolist()
        for k in range(min_length, max_length + 1):
            cands.update(tuple(s[j:j + k]) for j in range(len(s) - k + 1))
    cands = sorted(cands)
    ps = ngram_match(db, cands)
    keep = (ps.support_fractions() >= min_support).any(axis=1)
    return ps.select(np.flatnonzero(keep))


def fisher_scorer(patterns, db):
    """Two-sided Fisher exact test on presence per pattern, BH q-values."""
    sup, sizes = patterns.support_counts, patterns.group_sizes
    p = np.array([fisher_exact([[a, sizes[0] - a], [b, sizes[1] - b]])[1] for a, b in sup])
    return pd.DataFrame({"pattern": [format_pattern(x, patterns.vocab) for x in patterns.patterns],
                         "p_value": p, "q_value": false_discovery_control(p)})


def planted_data(n_learners=60, seed=0, signal=True, mean_events=40):
    """Events and outcomes: strong learners do 'set_light > advance_week > measure_height'
    in that order, weak learners use the same actions in another order, so only the
    ordering (not the action frequencies) tells the groups apart."""
    rng = np.random.default_rng(seed)
    rows, out = [], []
    for i in range(n_learners):
        lr = f"g{i:03d}"
        strong = i % 2 == 0
        score = (1.0 if strong else 0.0) + rng.normal(0, 0.1)
        n = int(rng.integers(mean_events // 2, mean_events * 3 // 2))
        acts = []
        while len(acts) < n:
            if rng.random() < 0.35:
                block = (["set_light", "advance_week", "measure_height"] if strong or not signal
                         else ["advance_week", "set_light", "measure_height"])
                acts += block
            else:
                acts.append(ACTIONS[int(rng.integers(len(ACTIONS)))])
        t = np.cumsum(rng.exponential(10.0, size=len(acts)))
        rows += [(lr, float(tt), a) for tt, a in zip(t, acts)]
        out.append((lr, score))
    events = pd.DataFrame(rows, columns=["learner", "time", "action"])
    outcomes = pd.DataFrame(out, columns=["learner", "score"])
    return events, outcomes
