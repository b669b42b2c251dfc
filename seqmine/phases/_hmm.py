"""Low-level hidden Markov model computations on concatenated token arrays.

Everything here works on plain arrays: ``X`` (flat int array of symbols, all
sequences concatenated) plus ``lengths`` -- the form hmmlearn uses. Fitting calls
``hmmlearn.hmm.CategoricalHMM`` (Baum--Welch); scoring is a batched scaled forward
pass in numpy (checked in the tests against hmmlearn and against brute-force
enumeration of all state paths); Viterbi decoding calls hmmlearn.
"""

from __future__ import annotations

import contextlib
import logging

import numpy as np
from hmmlearn import _hmmc
from hmmlearn.hmm import CategoricalHMM

__all__ = [
    "n_free_parameters",
    "apply_emission_floor",
    "forward_loglik",
    "viterbi",
    "posterior_occupancy",
    "sample_sequences",
    "fit_restart",
    "start_point",
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

    Sequences are processed together, one time step at a time, longest first, so
    the cost is ``O(total tokens * N^2)`` with a Python loop over the longest
    length only. An empty sequence has log-likelihood 0; a sequence impossible
    under the model has ``-inf``.

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
    pi = np.asarray(startprob, dtype=np.float64)
    A = np.asarray(transmat, dtype=np.float64)
    Bt = np.ascontiguousarray(np.asarray(emissionprob, dtype=np.float64).T)  # (M, N)
    X = np.asarray(X, dtype=np.int64)
    lengths, offsets, order = _order_by_length(lengths)
    out = np.zeros(len(lengths), dtype=np.float64)
    if len(lengths) == 0 or lengths.max(initial=0) == 0:
        return out
    sorted_len = lengths[order]
    starts = offsets[:-1][order]
    # n_active[t] = number of sequences (in sorted order) longer than t
    t_max = int(sorted_len[0])
    n_active = len(sorted_len) - np.searchsorted(sorted_len[::-1], np.arange(t_max), side="right")
    acc = np.zeros(len(lengths), dtype=np.float64)
    alpha = None
    with np.errstate(divide="ignore", invalid="ignore", under="ignore"):
        for t in range(t_max):
            k = int(n_active[t])
            obs = X[starts[:k] + t]
            if t == 0:
                alpha = pi[None, :] * Bt[obs]
            else:
                alpha = (alpha[:k] @ A) * Bt[obs]
            c = alpha.sum(axis=1)
            acc[:k] += np.log(c)
            alpha = alpha / np.where(c > 0, c, 1.0)[:, None]
    out[order] = acc
    return out


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
    lengths = np.asarray(lengths, dtype=np.int64)
    hmm = _hmm_from(startprob, transmat, emissionprob, implementation="scaling")
    try:
        post = hmm.predict_proba(X.reshape(-1, 1), lengths[lengths > 0])
    except ValueError:  # underflow in the scaled pass: use log space
        hmm = _hmm_from(startprob, transmat, emissionprob)
        post = hmm.predict_proba(X.reshape(-1, 1), lengths[lengths > 0])
    return post.mean(axis=0)


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


def start_point(X, n_states, n_symbols, seed):
    """Random start of Baum--Welch, drawn with ``numpy.random.default_rng(seed)``.

    Start probabilities: flat Dirichlet. Transition rows: ``0.5 I + 0.5 Dir(1)``
    (phases tend to persist). Emission rows: ``0.8 Dir(1) + 0.2 f`` with ``f`` the
    overall token frequencies. Compared with flat draws for everything, this start
    stalls less often in near-symmetric saddles (fewer EM iterations, more restarts
    reaching the best optimum on our benchmark data).

    Returns
    -------
    startprob, transmat, emissionprob : ndarray
    """
    rng = np.random.default_rng(seed)
    freq = np.bincount(np.asarray(X, dtype=np.int64), minlength=n_symbols).astype(np.float64)
    freq = (freq + 1e-3) / (freq.sum() + 1e-3 * n_symbols)
    start = rng.dirichlet(np.ones(n_states))
    trans = 0.5 * np.eye(n_states) + 0.5 * rng.dirichlet(np.ones(n_states), size=n_states)
    emis = 0.8 * rng.dirichlet(np.ones(n_symbols), size=n_states) + 0.2 * freq[None, :]
    emis /= emis.sum(axis=1, keepdims=True)
    return start, trans, emis


def fit_restart(X, lengths, n_states, n_symbols, seed, *, n_iter=200, tol=1e-4,
                emission_floor=1e-4, start=None):
    """One Baum--Welch run from a random start; returns fitted parameters.

    The start point comes from :func:`start_point` unless ``start`` gives
    ``(startprob, transmat, emissionprob)`` (then ``seed`` is unused). ``tol`` is per
    token: EM stops when the log-likelihood gains less than ``tol * n_tokens``.

    Returns
    -------
    dict
        ``startprob``, ``transmat``, ``emissionprob`` (floored), ``loglik`` (total
        log-likelihood of the floored model on ``X``), ``n_iter`` (EM iterations
        run) and ``converged``.
    """
    X = np.asarray(X, dtype=np.int64)
    lengths = np.asarray(lengths, dtype=np.int64)
    if start is None:
        start, trans, emis = start_point(X, n_states, n_symbols, seed)
    else:
        start, trans, emis = (np.asarray(a, dtype=np.float64) for a in start)
    # the scaled forward-backward is ~10x faster than hmmlearn's log version; if it
    # underflows (hmmlearn raises ValueError) the same start is refitted in log space
    for implementation in ("scaling", "log"):
        hmm = _LeanCategoricalHMM(n_components=n_states, n_features=n_symbols, init_params="",
                             params="ste", n_iter=n_iter, tol=tol * max(len(X), 1),
                             random_state=0, implementation=implementation)
        hmm.startprob_ = start.copy()
        hmm.transmat_ = trans.copy()
        hmm.emissionprob_ = emis.copy()
        try:
            with _quiet_hmmlearn():
                hmm.fit(X.reshape(-1, 1), lengths)
            break
        except ValueError:
            if implementation == "log":
                raise
    pi, A = _renormalise(hmm.startprob_), _renormalise(hmm.transmat_)
    B = apply_emission_floor(hmm.emissionprob_, emission_floor)
    ll = float(forward_loglik(pi, A, B, X, lengths).sum())
    return {"startprob": pi, "transmat": A, "emissionprob": B, "loglik": ll,
            "n_iter": int(hmm.monitor_.iter), "converged": bool(hmm.monitor_.converged)}


# ----------------------------------------------------------------- helpers
@contextlib.contextmanager
def _quiet_hmmlearn():
    """Mute hmmlearn's logging during a fit.

    hmmlearn logs "Model is not converging" when EM's log-likelihood drops by
    rounding noise near convergence; with no logging configured Python prints it to
    stderr, which would clutter the command line. The level is restored afterwards.
    """
    logger = logging.getLogger("hmmlearn")
    old = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(old)


class _LeanCategoricalHMM(CategoricalHMM):
    """hmmlearn's CategoricalHMM with a leaner E-step for many short sequences.

    Same computation as hmmlearn's scaled E-step (its own compiled forward, backward
    and xi routines, the same posterior normalisation), minus the per-sequence
    Python overhead: emission counts are accumulated once for all sequences with
    ``np.bincount`` instead of ``np.add.at`` per sequence. The tests check that a
    fit from the same start equals stock hmmlearn's. The log implementation and
    partial ``params`` fall back to hmmlearn unchanged.
    """

    def _do_estep(self, X, lengths):
        if self.implementation != "scaling" or self.params != "ste":
            return super()._do_estep(X, lengths)
        x = np.asarray(X)[:, 0]
        if lengths is None:
            lengths = [len(x)]
        n = self.n_components
        Bt = np.ascontiguousarray(self.emissionprob_.T)
        stats = self._initialize_sufficient_statistics()
        posteriors = np.empty((len(x), n))
        logprob = 0.0
        start = 0
        for length in lengths:
            end = start + int(length)
            frame = Bt[x[start:end]]
            lp, fwd, scaling = _hmmc.forward_scaling(self.startprob_, self.transmat_, frame)
            bwd = _hmmc.backward_scaling(self.startprob_, self.transmat_, frame, scaling)
            post = fwd * bwd
            total = post.sum(axis=1, keepdims=True)
            total[total == 0] = 1.0
            post /= total
            posteriors[start:end] = post
            stats["start"] += post[0]
            if end - start > 1:
                stats["trans"] += _hmmc.compute_scaling_xi_sum(fwd, self.transmat_, bwd, frame)
            logprob += lp
            start = end
        stats["nobs"] = len(lengths)
        for k in range(n):
            stats["obs"][k] = np.bincount(x, weights=posteriors[:, k],
                                          minlength=self.n_features)
        return stats, logprob


def _renormalise(p):
    p = np.asarray(p, dtype=np.float64)
    s = p.sum(axis=-1, keepdims=True)
    # a state never visited during EM can get an all-zero row: make it uniform
    n = p.shape[-1]
    p = np.where(s > 0, p / np.where(s > 0, s, 1.0), 1.0 / n)
    return p


def _hmm_from(startprob, transmat, emissionprob, implementation="log"):
    B = np.asarray(emissionprob, dtype=np.float64)
    hmm = CategoricalHMM(n_components=B.shape[0], n_features=B.shape[1], init_params="",
                         params="", implementation=implementation)
    hmm.startprob_ = np.asarray(startprob, dtype=np.float64)
    hmm.transmat_ = np.asarray(transmat, dtype=np.float64)
    hmm.emissionprob_ = B
    return hmm
