"""Generated data sets for the phase-model tests: greenhouse actions with pause tokens.

Every number here is invented; nothing comes from a real course or study.

- :func:`token_generators` -- two known 3-state HMMs over actions *and* pause tokens
  (one per outcome group; same states, different transitions), for recovery tests.
- :func:`token_hmm_db` -- sequences sampled from them.
- :func:`phase_process_db` -- a latent-phase process that emits an action and a gap
  after it; gaps become pause tokens as the encoder would write them (short gaps no
  token, medium and long gaps ``pause:medium`` / ``pause:long``). Not an HMM over
  tokens, like real logs.
- :func:`short_sessions_db` -- many short sequences (sessions) of such a process.
"""

import numpy as np

from seqmine.encoding.sequences import SequenceDB
from seqmine.phases import PhaseModel

__all__ = ["ACTIONS", "PAUSES", "TOKENS", "token_generators", "token_hmm_db",
           "phase_process_db", "short_sessions_db"]

ACTIONS = ["set_light", "set_water", "set_temperature", "advance_week", "measure_height",
           "measure_leaves", "open_chart", "paint_pot", "reset"]
PAUSES = ["pause:medium", "pause:long"]
TOKENS = ACTIONS + PAUSES


def _row(weights):
    row = np.full(len(TOKENS), 0.004)
    for token, w in weights.items():
        row[TOKENS.index(token)] = w
    return row / row.sum()


def token_generators():
    """Two 3-state HMMs over :data:`TOKENS` (strong, weak): states "setting up",
    "trials" (with long pauses) and "off task" (with medium pauses). The groups differ
    in their transitions only."""
    B = np.array([
        _row({"set_light": 0.3, "set_water": 0.3, "set_temperature": 0.3}),
        _row({"advance_week": 0.3, "measure_height": 0.25, "measure_leaves": 0.15,
              "pause:long": 0.25}),
        _row({"paint_pot": 0.35, "reset": 0.25, "open_chart": 0.1, "pause:medium": 0.25}),
    ])
    A_strong = np.array([[0.60, 0.35, 0.05], [0.15, 0.80, 0.05], [0.30, 0.30, 0.40]])
    A_weak = np.array([[0.55, 0.15, 0.30], [0.10, 0.55, 0.35], [0.15, 0.10, 0.75]])
    pi = np.array([0.6, 0.2, 0.2])
    return (PhaseModel.from_parameters(pi, A_strong, B, TOKENS, label="strong"),
            PhaseModel.from_parameters(pi, A_weak, B, TOKENS, label="weak"))


def token_hmm_db(n=60, length=60, seed=1):
    """``n`` sequences of ``length`` tokens per group from :func:`token_generators`."""
    seqs, groups = [], []
    for k, gen in enumerate(token_generators()):
        X, _ = gen.sample([length] * n, random_state=seed + k)
        seqs += [[TOKENS[t] for t in X[i * length:(i + 1) * length]] for i in range(n)]
        groups += [gen.label] * n
    return SequenceDB.from_lists(seqs, groups=groups, vocab=TOKENS, pause_tokens=PAUSES)


# ---------------------------------------------------------------- phase process
#: Four phases: setting up, trials, reviewing, off task. Emissions over ACTIONS.
_PHASE_EMIT = np.array([
    [0.3, 0.3, 0.3, 0.04, 0.02, 0.02, 0.02, 0.0, 0.0],
    [0.02, 0.02, 0.01, 0.35, 0.35, 0.2, 0.05, 0.0, 0.0],
    [0.02, 0.0, 0.0, 0.05, 0.05, 0.03, 0.85, 0.0, 0.0],
    [0.03, 0.03, 0.02, 0.02, 0.0, 0.0, 0.0, 0.55, 0.35],
])
#: Probability of a short (no token), medium and long gap after an action, per phase.
_PHASE_GAP = np.array([[0.7, 0.25, 0.05], [0.3, 0.2, 0.5], [0.2, 0.6, 0.2],
                       [0.85, 0.13, 0.02]])


def _phase_transitions(tendency):
    t = float(np.clip(tendency, -2, 2))
    A = np.array([[0.6, 0.25 + 0.03 * t, 0.05, 0.10 - 0.03 * t],
                  [0.1, 0.70 + 0.04 * t, 0.12, 0.08 - 0.04 * t],
                  [0.2, 0.25, 0.5, 0.05],
                  [0.25, 0.10, 0.05, 0.60 - 0.05 * t]])
    A = np.maximum(A, 0.01)
    return A / A.sum(axis=1, keepdims=True)


def _phase_tokens(rng, n_events, tendency):
    A = np.cumsum(_phase_transitions(tendency), axis=1)
    E = np.cumsum(_PHASE_EMIT / _PHASE_EMIT.sum(axis=1, keepdims=True), axis=1)
    G = np.cumsum(_PHASE_GAP, axis=1)
    phase = int(rng.integers(4))
    out = []
    for i in range(n_events):
        if i:
            phase = min(int(np.searchsorted(A[phase], rng.random(), side="right")), 3)
        out.append(ACTIONS[min(int(np.searchsorted(E[phase], rng.random(), side="right")),
                               len(ACTIONS) - 1)])
        gap = min(int(np.searchsorted(G[phase], rng.random(), side="right")), 2)
        if gap and i + 1 < n_events:      # a pause token sits between two actions
            out.append(PAUSES[gap - 1])
    return out


def phase_process_db(n_learners=80, events=(40, 110), seed=3):
    """One sequence per learner from the four-phase process; groups by tendency."""
    rng = np.random.default_rng(seed)
    tendency = rng.standard_normal(n_learners)
    seqs = [_phase_tokens(rng, int(rng.integers(events[0], events[1] + 1)), t)
            for t in tendency]
    groups = np.where(tendency > np.median(tendency), "strong", "weak").tolist()
    return SequenceDB.from_lists(seqs, groups=groups, vocab=TOKENS, pause_tokens=PAUSES)


def short_sessions_db(n_learners=40, seed=5):
    """Several short sequences (sessions of 4 to 40 events) per learner."""
    rng = np.random.default_rng(seed)
    seqs, groups, learners = [], [], []
    for i in range(n_learners):
        t = rng.standard_normal()
        for _ in range(int(rng.integers(3, 9))):
            seqs.append(_phase_tokens(rng, int(rng.integers(4, 41)), t))
            groups.append("strong" if t > 0 else "weak")
            learners.append(f"L{i:03d}")
    return SequenceDB.from_lists(seqs, groups=groups, learners=learners, vocab=TOKENS,
                                 pause_tokens=PAUSES)
