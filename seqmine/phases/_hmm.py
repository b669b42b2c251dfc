"""Low-level hidden Markov model computations on concatenated token arrays.

Everything here works on plain arrays: ``X`` (flat int array of symbols, all
sequences concatenated) plus ``lengths`` -- the form hmmlearn uses. Scoring and
posteriors are seqmine's own scaled forward--backward (:mod:`._lanes`, checked in
the tests against hmmlearn's public ``score`` and ``predict_proba`` and against
brute-force enumeration of all state paths); fitting is :mod:`._em`; Viterbi
decoding calls hmmlearn's public ``CategoricalHMM.decode`` on a model built from its
documented attributes (``startprob_``, ``transmat_``, ``emissionprob_``).
"""

from __future__ import annotations

import numpy as np
from hmmlearn.hmm import CategoricalHMM

from ._lanes import Lanes

__all__ = [
    "n_free_parameters",
    "apply_emission_floor",
    "forward_loglik",
    "viterbi",
    "posterior_occupancy",
    "sample_sequences",
    "derive_seed",
]


def n_free_parameters(n_states, n_symbols):
    """Free parameters of a categorical HMM: ``(N-1) + N(N-1) + N(M-1)``.

    Start probabilities (N - 1), transition rows (N - 1 each) and emission rows
    (M - 1 each); the same count hmmlearn's ``bic`` uses.

    Examples
    --------
    >>> n_free_parameters(2, 3), n_free_parameters(3, 4)
    (7, 17)
    """
    n, m = int(n_states), int(n_symbols)
    return (n - 1) + n * (n - 1) + n * (m - 1)


def apply_emission_floor(emissionprob, floor):
    """Additive smoothing ``(b + floor) / (1 + M * floor)`` of each emission row.

    With ``floor > 0`` no symbol has probability 0, so a token never seen in the
    training data (e.g. absent from one outcome group) keeps a small probability.
    """
    b = np.asarray(emissionprob, dtype=np.float64)
    if floor <= 0:
        return b / b.sum(axis=1, keepdims=True)
    b = b + floor
    return b / b.sum(axis=1, keepdims=True)


def _order_by_length(lengths):
    lengths = np.asarray(lengths, dtype=np.int64)
    offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    order = np.argsort(-lengths, kind="stable")
    return lengths, offsets, order


def forward_loglik(startprob, transmat, emissionprob, X, lengths):
    """Log-likelihood ``log P(O | model)`` of each sequence (scaled forward pass).

    All sequences are processed together (:class:`._lanes.Lanes`), so the cost is
    ``O(total tokens * N^2)`` numpy work with a short Python loop. An empty
    sequence has log-likelihood 0; a sequence impossible under the model has
    ``-inf``.

    Parameters
    ----------
    startprob : ndarray, shape (N,)
    transmat : ndarray, shape (N, N)
    emissionprob : ndarray, shape (N, M)
    X : ndarray of int, shape (n_tokens,)
    lengths : ndarray of int, shape (n_sequences,)

    Returns
    -------
    ndarray of float, shape (n_sequences,)

    Examples
    --------
    >>> pi = np.array([0.8, 0.2]); A = np.array([[0.6, 0.4], [0.5, 0.5]])
    >>> B = np.array([[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]])
    >>> float(np.exp(forward_loglik(pi, A, B, np.array([2, 0, 2]), [3])[0])).__round__(6)
    0.028562
    """
    X = np.asarray(X, dtype=np.int64)
    B = np.asarray(emissionprob, dtype=np.float64)
    lanes = Lanes(X, lengths, B.shape[1])
    return lanes.loglik(startprob, transmat, B)[0]


def viterbi(startprob, transmat, emissionprob, X, lengths):
    """Most likely state path (hmmlearn's Viterbi) of every sequence.

    Returns
    -------
    logprob : float
        Sum over sequences of ``log P(O, best path | model)``.
    states : ndarray of int, shape (n_tokens,)
        Concatenated state paths.
    """
    X = np.asarray(X, dtype=np.int64)
    if len(X) == 0:
        return 0.0, np.zeros(0, dtype=np.int64)
    hmm = _hmm_from(startprob, transmat, emissionprob)
    lengths = np.asarray(lengths, dtype=np.int64)
    lengths = lengths[lengths > 0]
    logprob, states = hmm.decode(X.reshape(-1, 1), lengths, algorithm="viterbi")
    return float(logprob), np.asarray(states, dtype=np.int64)


def posterior_occupancy(startprob, transmat, emissionprob, X, lengths):
    """Expected share of tokens spent in each state (forward--backward posteriors)."""
    X = np.asarray(X, dtype=np.int64)
    n = len(np.asarray(startprob))
    if len(X) == 0:
        return np.full(n, 1.0 / n)
    B = np.asarray(emissionprob, dtype=np.float64)
    gamma = Lanes(X, lengths, B.shape[1]).estep(startprob, transmat, B)["gamma"][0]
    return gamma.mean(axis=1)


def sample_sequences(startprob, transmat, emissionprob, lengths, rng):
    """Draw sequences of the given lengths from the model.

    Parameters
    ----------
    lengths : array of int
    rng : numpy.random.Generator

    Returns
    -------
    X : ndarray of int64, shape (sum(lengths),)
        Concatenated symbols.
    states : ndarray of int64, shape (sum(lengths),)
        The hidden states that produced them.
    """
    pi = np.asarray(startprob, dtype=np.float64)
    A_cum = np.cumsum(np.asarray(transmat, dtype=np.float64), axis=1)
    B_cum = np.cumsum(np.asarray(emissionprob, dtype=np.float64), axis=1)
    lengths, offsets, order = _order_by_length(lengths)
    total = int(offsets[-1])
    X = np.zeros(total, dtype=np.int64)
    S = np.zeros(total, dtype=np.int64)
    if total == 0:
        return X, S
    sorted_len = lengths[order]
    starts = offsets[:-1][order]
    t_max = int(sorted_len[0])
    n_active = len(sorted_len) - np.searchsorted(sorted_len[::-1], np.arange(t_max), side="right")
    n_sym = B_cum.shape[1]
    n_st = len(pi)
    state = None
    for t in range(t_max):
        k = int(n_active[t])
        u = rng.random(k)
        if t == 0:
            state = np.minimum(np.searchsorted(np.cumsum(pi), u, side="right"), n_st - 1)
        else:
            rows = A_cum[state[:k]]
            state = np.minimum((rows <= u[:, None]).sum(axis=1), n_st - 1)
        v = rng.random(k)
        sym = np.minimum((B_cum[state] <= v[:, None]).sum(axis=1), n_sym - 1)
        pos = starts[:k] + t
        X[pos] = sym
        S[pos] = state
    return X, S


def derive_seed(*parts):
    """A 32-bit seed derived deterministically from integers (numpy SeedSequence)."""
    return int(np.random.SeedSequence([int(p) for p in parts]).generate_state(1)[0])


# ----------------------------------------------------------------- helpers
def _hmm_from(startprob, transmat, emissionprob, implementation="log"):
    B = np.asarray(emissionprob, dtype=np.float64)
    hmm = CategoricalHMM(n_components=B.shape[0], n_features=B.shape[1], init_params="",
                         params="", implementation=implementation)
    hmm.startprob_ = np.asarray(startprob, dtype=np.float64)
    hmm.transmat_ = np.asarray(transmat, dtype=np.float64)
    hmm.emissionprob_ = B
    return hmm
