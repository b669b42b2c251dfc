"""Generated logs where the truth about volume and order is known (test and benchmark helper).

* :func:`volume_only_db` -- both groups follow the same Markov process; one group's
  sequences are ``ratio`` times longer. Every difference in pattern presence is an
  artefact of activity volume.
* :func:`opposite_order_db` -- both groups follow the same process and, at the same rate,
  insert the same three actions as a run: ``strong`` in one order, ``weak`` in the
  opposite order. Volume and item counts are alike; only the order differs.
* :func:`null_db` -- no group difference at all (optionally a volume difference), for
  calibration.
* :func:`frequency_only_db` -- tokens in random order in both groups, ``strong``
  learners use one action more often: presence differs, order does not (a null for the
  order test).
* :func:`session_db` -- several sessions per learner with a learner-level effect, for
  unit-of-analysis checks.
* :func:`to_event_log` -- the events and outcomes files of such a database, for runs
  of the whole pipeline.

All data are invented here (greenhouse action names, random numbers); none is a check
value. The process is a first-order Markov chain over greenhouse actions plus two
pause tokens whose transition rows come from a fixed Dirichlet draw, so patterns
overlap and depend on each other the way mined patterns do.
"""

import numpy as np
import pandas as pd

from seqmine.encoding.sequences import SequenceDB

ACTIONS = ["add_seedling", "set_light", "set_water", "set_temperature", "advance_week",
           "measure_height", "measure_leaves", "open_chart", "reset", "open_guide",
           "paint_pot"]
PAUSES = ["pause:medium", "pause:long"]
VOCAB = ACTIONS + PAUSES
#: Episode inserted by :func:`opposite_order_db` (strong order; weak uses it reversed).
EPISODE = ("set_light", "advance_week", "measure_height")


def transition_matrix(seed=0, concentration=0.6):
    """Row-stochastic matrix over :data:`VOCAB`; a pause never follows a pause."""
    rng = np.random.default_rng([seed, 99])
    v = len(VOCAB)
    t = rng.dirichlet(np.full(v, concentration), size=v)
    pause = np.array([tok in PAUSES for tok in VOCAB])
    t[np.ix_(pause, pause)] = 0.0
    return t / t.sum(axis=1, keepdims=True)


def markov_sequence(rng, length, trans):
    """One sequence of ``length`` token ids from the chain ``trans`` (uniform start)."""
    cum = np.cumsum(trans, axis=1)
    cum[:, -1] = 1.0
    out = np.empty(length, dtype=np.int64)
    out[0] = rng.integers(len(trans))
    u = rng.random(length)
    for k in range(1, length):
        out[k] = np.searchsorted(cum[out[k - 1]], u[k], side="right")
    return out


def _lengths(rng, n, median, spread=0.35):
    return np.maximum(4, np.rint(rng.lognormal(np.log(median), spread, n))).astype(int)


def _db(seqs, groups, learners=None):
    return SequenceDB.from_lists([[VOCAB[t] for t in s] for s in seqs], groups=groups,
                                 group_names=["strong", "weak"], pause_tokens=PAUSES,
                                 vocab=VOCAB, learners=learners)


def volume_only_db(seed, n_per_group=150, ratio=1.7, median=60):
    """Same Markov process in both groups; ``strong`` sequences ``ratio`` times longer."""
    rng = np.random.default_rng(seed)
    trans = transition_matrix()
    seqs, groups = [], []
    for g, scale in (("strong", ratio), ("weak", 1.0)):
        for length in _lengths(rng, n_per_group, median * scale):
            seqs.append(markov_sequence(rng, int(length), trans))
            groups.append(g)
    return _db(seqs, groups)


def opposite_order_db(seed, n_per_group=100, median=60, episodes=(1, 4)):
    """Same process and volume; each learner inserts 1-3 runs of :data:`EPISODE`,
    ``strong`` in that order and ``weak`` reversed."""
    rng = np.random.default_rng(seed)
    trans = transition_matrix()
    ids = [VOCAB.index(t) for t in EPISODE]
    seqs, groups = [], []
    for g, run in (("strong", ids), ("weak", ids[::-1])):
        for length in _lengths(rng, n_per_group, median):
            s = list(markov_sequence(rng, int(length), trans))
            for _ in range(int(rng.integers(*episodes))):
                at = int(rng.integers(0, len(s) + 1))
                s[at:at] = run
            seqs.append(np.array(s))
            groups.append(g)
    return _db(seqs, groups)


def null_db(seed, n_per_group=40, ratio=1.0, median=40, n_groups=2):
    """No behaviour difference; with ``ratio`` != 1 the first group is more active."""
    rng = np.random.default_rng(seed)
    trans = transition_matrix()
    names = ["strong", "weak", "middle"][:n_groups]
    seqs, groups = [], []
    for k, g in enumerate(names):
        for length in _lengths(rng, n_per_group, median * (ratio if k == 0 else 1.0)):
            seqs.append(markov_sequence(rng, int(length), trans))
            groups.append(g)
    return SequenceDB.from_lists([[VOCAB[t] for t in s] for s in seqs], groups=groups,
                                 group_names=names, pause_tokens=PAUSES, vocab=VOCAB)


def frequency_only_db(seed, n_per_group=40, median=40, action="reset", factor=2.0):
    """Tokens drawn independently (random order in both groups); ``strong`` learners
    draw ``action`` ``factor`` times as often. Patterns holding it are more common
    there, but the arrangement is random everywhere: a null for the order test."""
    rng = np.random.default_rng(seed)
    base = np.full(len(VOCAB), 1.0)
    tok = VOCAB.index(action)
    seqs, groups = [], []
    for g in ("strong", "weak"):
        p = base.copy()
        if g == "strong":
            p[tok] *= factor
        p /= p.sum()
        for length in _lengths(rng, n_per_group, median):
            seqs.append(rng.choice(len(VOCAB), size=int(length), p=p))
            groups.append(g)
    return _db(seqs, groups)


def session_db(seed, n_per_group=30, sessions=(2, 6), median=25, effect=0.0):
    """Several sessions per learner; with ``effect`` > 0 ``strong`` learners run
    :data:`EPISODE` more often in every session (a learner-level difference)."""
    rng = np.random.default_rng(seed)
    trans = transition_matrix()
    ids = [VOCAB.index(t) for t in EPISODE]
    seqs, groups, learners = [], [], []
    for g in ("strong", "weak"):
        for k in range(n_per_group):
            tendency = rng.normal()
            for _ in range(int(rng.integers(*sessions))):
                s = list(markov_sequence(rng, int(_lengths(rng, 1, median)[0]), trans))
                if rng.random() < 0.3 + 0.2 * tendency + (effect if g == "strong" else 0.0):
                    at = int(rng.integers(0, len(s) + 1))
                    s[at:at] = ids
                seqs.append(np.array(s))
                groups.append(g)
                learners.append(f"{g}_{k:03d}")
    return _db(seqs, groups, learners)


def to_event_log(db, seed=0, start="2026-03-02T09:00:00"):
    """Events (learner, time, action) and label outcomes that encode back to ``db``'s
    actions; pause tokens become gaps (``pause:medium`` 12 s, ``pause:long`` 60 s,
    otherwise 2 s), so the default pause bins recover them approximately."""
    rng = np.random.default_rng([seed, 7])
    t0 = pd.Timestamp(start, tz="UTC")
    rows = []
    gap = {"pause:medium": 12.0, "pause:long": 60.0}
    for i in range(db.n_sequences):
        clock = float(rng.integers(0, 3600))
        learner = db.learners[i]
        for tok in db.decode(i):
            if tok in gap:
                clock += gap[tok] + float(rng.integers(0, 3))
                continue
            rows.append((learner, clock, tok))
            clock += 2.0 + float(rng.integers(0, 2))
    ev = pd.DataFrame(rows, columns=["learner", "seconds", "action"])
    ev["time"] = (t0 + pd.to_timedelta(ev["seconds"], unit="s")).dt.strftime(
        "%Y-%m-%dT%H:%M:%SZ")
    label = {db.learners[i]: db.group_names[db.groups[i]] for i in range(db.n_sequences)}
    out = pd.DataFrame({"learner": list(label), "label": list(label.values())})
    return ev[["learner", "time", "action"]], out
