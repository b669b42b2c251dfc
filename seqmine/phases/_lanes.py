"""Scaled forward--backward for many sequences at once, in numpy.

The tokens of all sequences are cut into *lanes* of at most ``chunk`` tokens (a
sequence longer than that becomes several consecutive lanes) and laid out
time-major: the first token of every lane, then the second token of every lane
long enough, and so on. One step of the forward or backward recursion is then a
handful of numpy operations on a block of lanes, so the Python loop runs about
``chunk`` times instead of once per token of the longest sequence.

Lanes of one sequence are joined exactly. The product of the matrices
``A diag(b(o_t))`` over a lane (its *transfer matrix*) carries the filtered state
distribution from the end of one lane to the end of the next (forward) and the
scaled backward vector the other way, so every lane starts its own recursion from
exact boundary vectors. The result is the ordinary scaled forward--backward
(Rabiner 1989, section V.A): ``alpha_hat_t = P(q_t | o_1..t)``, scaling factors
``c_t = P(o_t | o_1..t-1)`` with ``log P(O) = sum_t log c_t``, posteriors
``gamma_t`` and expected transition counts. The tests check it against hmmlearn's
public ``score`` and ``predict_proba`` and against brute-force enumeration of the
state paths.

Several models (e.g. the restarts of one fit) are handled in one pass: every
array has a leading model axis.

References
----------
Rabiner, L. R. (1989). A tutorial on hidden Markov models and selected
applications in speech recognition. Proceedings of the IEEE 77(2), 257-286.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["Lanes", "chunk_length"]


def chunk_length(longest):
    """Lane length for data whose longest sequence has ``longest`` tokens.

    The forward and backward passes loop about three times over the lane length
    and twice over the number of lanes of the longest sequence; ``sqrt(2 L / 3)``
    balances the two (at least 32 tokens, so short data are not cut at all).

    Examples
    --------
    >>> chunk_length(20), chunk_length(6000)
    (20, 64)
    """
    longest = int(longest)
    if longest <= 32:
        return max(longest, 1)
    return int(max(32, math.ceil(math.sqrt(2.0 * longest / 3.0))))


class Lanes:
    """Time-major layout of concatenated sequences, cut into lanes.

    Parameters
    ----------
    X : array of int, shape (n_tokens,)
        Symbols of all sequences, concatenated.
    lengths : array of int, shape (n_sequences,)
        Zero-length sequences are allowed (log-likelihood 0).
    n_symbols : int
    chunk : int, optional
        Lane length; :func:`chunk_length` of the longest sequence by default.

    Examples
    --------
    >>> lanes = Lanes(np.array([0, 1, 1, 0, 1]), [3, 2], n_symbols=2)
    >>> pi = np.array([[0.6, 0.4]]); A = np.array([[[0.7, 0.3], [0.4, 0.6]]])
    >>> B = np.array([[[0.9, 0.1], [0.2, 0.8]]])
    >>> np.round(lanes.loglik(pi, A, B), 6).tolist()
    [[-2.301885, -1.565421]]
    """

    def __init__(self, X, lengths, n_symbols, chunk=None):
        X = np.asarray(X, dtype=np.int64)
        lengths = np.asarray(lengths, dtype=np.int64)
        if int(lengths.sum()) != len(X):
            raise ValueError(f"lengths sum to {int(lengths.sum())} but there are {len(X)} tokens")
        self.n_symbols = int(n_symbols)
        self.n_tokens = len(X)
        self.n_sequences = len(lengths)
        self.lengths = lengths
        offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        longest = int(lengths.max(initial=0))
        C = int(chunk) if chunk else chunk_length(longest)
        self.chunk = C
        seqs = np.flatnonzero(lengths > 0)
        n_chunks = -(-lengths[seqs] // C)
        lane_seq = np.repeat(seqs, n_chunks)
        first_lane = np.cumsum(n_chunks) - n_chunks
        lane_k = np.arange(len(lane_seq)) - np.repeat(first_lane, n_chunks)
        lane_start = offsets[lane_seq] + lane_k * C
        lane_len = np.minimum(C, lengths[lane_seq] - lane_k * C)
        # lanes in order of decreasing length: at step t the active lanes are a prefix
        order = np.lexsort((np.arange(len(lane_len)), -lane_len))
        lane_seq, lane_k = lane_seq[order], lane_k[order]
        lane_start, lane_len = lane_start[order], lane_len[order]
        n_lanes = len(lane_len)
        self.n_lanes = n_lanes
        self.lane_len = lane_len
        self.is_first = lane_k == 0
        rank = np.empty(n_lanes, dtype=np.int64)
        rank[order] = np.arange(n_lanes)          # rank of each lane in (seq, k) order
        steps = int(lane_len.max(initial=0))
        asc = lane_len[::-1]
        self.active = n_lanes - np.searchsorted(asc, np.arange(steps), side="right")
        self.block = np.zeros(steps + 1, dtype=np.int64)
        np.cumsum(self.active, out=self.block[1:])
        t_of = np.repeat(np.arange(steps), self.active)
        r_of = np.arange(self.n_tokens) - self.block[t_of]
        perm = lane_start[r_of] + t_of
        self.perm = perm                            # time-major slot -> token index
        self.X = X[perm]                            # symbols in time-major order
        self.seq = lane_seq[r_of]                   # sequence of each slot
        # consecutive tokens of one sequence across lane ends
        later = np.flatnonzero(lane_k > 0)                       # lanes with a predecessor
        pred = rank[order[later] - 1]                          # rank of the lane before
        across_prev = self.block[lane_len[pred] - 1] + pred
        self.later = later                                     # slot of a lane's first token = rank
        self.pred_last = across_prev                           # slot of its predecessor's last token
        # first slot of each non-empty sequence (its first lane at step 0)
        self.first_slot = np.flatnonzero(self.is_first)
        # chains of lanes for sequences cut into several lanes, longest chains first
        multi = np.flatnonzero(n_chunks > 1)
        by_chain = multi[np.argsort(-n_chunks[multi], kind="stable")]
        n_chain = n_chunks[by_chain]
        self.chains = []                            # chains[k] = ranks of lane k
        for k in range(int(n_chain.max(initial=0))):
            self.chains.append(rank[first_lane[by_chain[n_chain > k]] + k])
        # transfer matrices are needed for the lanes of multi-lane sequences only
        in_multi = np.zeros(n_lanes, dtype=bool)
        if self.chains:
            in_multi[np.concatenate(self.chains)] = True
        tr_lanes = np.flatnonzero(in_multi)         # ranks, still by decreasing length
        self.tr_lanes = tr_lanes
        self.tr_index = np.full(n_lanes, -1, dtype=np.int64)
        self.tr_index[tr_lanes] = np.arange(len(tr_lanes))
        tr_len = lane_len[tr_lanes]
        tr_steps = int(tr_len.max(initial=0))
        self.tr_active = len(tr_len) - np.searchsorted(tr_len[::-1], np.arange(tr_steps),
                                                       side="right")
        self.tr_slots = np.concatenate(
            [self.block[t] + tr_lanes[:k] for t, k in enumerate(self.tr_active)]
        ) if tr_steps else np.zeros(0, dtype=np.int64)
        self.tr_block = np.zeros(tr_steps + 1, dtype=np.int64)
        np.cumsum(self.tr_active, out=self.tr_block[1:])
        self.tr_first = self.is_first[tr_lanes]

    # ------------------------------------------------------------------ passes
    def loglik(self, startprob, transmat, emissionprob):
        """Log-likelihood of every sequence under each model, shape (K, n_sequences).

        Parameters are stacked over models: ``startprob`` (K, N), ``transmat``
        (K, N, N), ``emissionprob`` (K, N, M). A sequence impossible under a model
        gets ``-inf``.
        """
        pi, A, B = _stack(startprob, transmat, emissionprob)
        E = self._emissions(B)
        _, c, _ = self._forward(pi, A, E, keep_alpha=False)
        return self._per_sequence(c)

    def estep(self, startprob, transmat, emissionprob):
        """Expected sufficient statistics of Baum--Welch for each model.

        Returns
        -------
        dict
            ``loglik`` (K,) total log-likelihood, ``start`` (K, N) expected first
            states, ``trans`` (K, N, N) expected transitions, ``emit`` (K, N, M)
            expected emissions and ``gamma`` (K, N, n_tokens) the posteriors in
            time-major slot order.
        """
        pi, A, B = _stack(startprob, transmat, emissionprob)
        K, N = pi.shape
        E = self._emissions(B)
        alpha, c, P = self._forward(pi, A, E, keep_alpha=True)
        gamma, xi = self._backward(A, E, c, P, alpha)
        del alpha
        emit = np.empty((K, N, self.n_symbols))
        for k in range(K):
            for j in range(N):
                emit[k, j] = np.bincount(self.X, weights=gamma[k, j], minlength=self.n_symbols)
        with np.errstate(divide="ignore"):
            loglik = np.log(c).sum(axis=1)
        return {"loglik": loglik, "start": gamma[:, :, self.first_slot].sum(axis=2),
                "trans": A * xi, "emit": emit, "gamma": gamma}

    def posteriors(self, startprob, transmat, emissionprob):
        """Posterior state probabilities of every token, shape (K, n_tokens, N), in the
        original token order."""
        gamma = self.estep(startprob, transmat, emissionprob)["gamma"]
        out = np.empty((gamma.shape[0], self.n_tokens, gamma.shape[1]))
        out[:, self.perm] = gamma.transpose(0, 2, 1)
        return out

    # ---------------------------------------------------------------- internals
    def _emissions(self, B):
        # (K, N, T): b_j(o) of every slot, slots last
        return np.take(B, self.X, axis=2)

    def _per_sequence(self, c):
        K = c.shape[0]
        out = np.zeros((K, self.n_sequences))
        with np.errstate(divide="ignore"):
            logc = np.log(c)
        for k in range(K):
            out[k] = np.bincount(self.seq, weights=logc[k], minlength=self.n_sequences)
        return out

    def _transfer(self, A, E):
        """Product of ``A diag(b(o_t))`` over each lane of a multi-lane sequence, up to
        a positive factor; the first lane of a sequence starts with ``diag(b(o_0))``.
        Shape (K, N, N, n) with the lanes last."""
        K, N = A.shape[0], A.shape[1]
        n = len(self.tr_lanes)
        if n == 0:
            return np.zeros((K, N, N, 0))
        Et = E[:, :, self.tr_slots]                              # (K, N, slots)
        first = self.tr_first
        M = np.empty((K, N, N, n))
        M[:] = A[:, :, :, None]
        if first.any():
            M[:, :, :, first] = np.eye(N)[None, :, :, None]
        M *= Et[:, None, :, :n]
        out = M.copy()                 # finished lanes are copied here as they end
        spare = np.empty_like(M)
        At = A.transpose(0, 2, 1)[:, None]                       # (K, 1, N, N)
        steps = len(self.tr_active)
        with np.errstate(invalid="ignore", divide="ignore", under="ignore"):
            for t in range(1, steps):
                k = int(self.tr_active[t])
                lo = int(self.tr_block[t])
                m = spare[..., :k]
                np.matmul(At, M[..., :k], out=m)                 # sum_m M[i,m] A[m,j]
                m *= Et[:, None, :, lo:lo + k]
                if t % 8 == 0:                                   # keep clear of underflow
                    m /= np.maximum(m.sum(axis=(1, 2), keepdims=True), _TINY)
                M, spare = spare, M
                k1 = int(self.tr_active[t + 1]) if t + 1 < steps else 0
                if k1 < k:
                    out[..., k1:k] = M[..., k1:k]
        return out

    def _forward(self, pi, A, E, keep_alpha):
        K, N = pi.shape
        P = self._transfer(A, E)
        # filtered state distribution entering each lane (through the transfer matrices)
        a_in = np.empty((K, N, self.n_lanes))
        a_in[:] = pi[:, :, None]
        with np.errstate(invalid="ignore", divide="ignore", under="ignore"):
            for k in range(1, len(self.chains)):
                prev = self.chains[k - 1][:len(self.chains[k])]
                Pk = P[..., self.tr_index[prev]]                 # (K, N, N, m)
                v = np.einsum("kim,kijm->kjm", a_in[:, :, prev], Pk)
                a_in[:, :, self.chains[k]] = v / np.maximum(v.sum(axis=1, keepdims=True), _TINY)
        At = A.transpose(0, 2, 1)
        later = ~self.is_first
        if later.any():
            a_in[:, :, later] = np.matmul(At, a_in[:, :, later])
        T = self.n_tokens
        c = np.empty((K, T))
        if keep_alpha:
            alpha = np.empty((K, N, T))
        else:                          # two buffers of one step's width, used in turn
            alpha = None
            bufs = [np.empty((K, N, self.n_lanes)), np.empty((K, N, self.n_lanes))]
        prev = None
        with np.errstate(invalid="ignore", divide="ignore", under="ignore"):
            for t in range(len(self.active)):
                k = int(self.active[t])
                lo = int(self.block[t])
                a = alpha[:, :, lo:lo + k] if keep_alpha else bufs[t % 2][:, :, :k]
                if t == 0:
                    np.multiply(a_in, E[:, :, :k], out=a)
                else:
                    np.matmul(At, prev[:, :, :k], out=a)
                    a *= E[:, :, lo:lo + k]
                s = a.sum(axis=1)
                c[:, lo:lo + k] = s
                a /= np.maximum(s, _TINY)[:, None, :]
                prev = a
        return alpha, c, P

    def _backward(self, A, E, c, P, alpha):
        """Posteriors and the expected transition counts before the factor ``A``:
        ``sum_t alpha_hat_t(i) b_j(o_t+1) beta_hat_t+1(j) / c_t+1``.

        The backward vectors are normalised to sum 1 at every step (so they never
        overflow); each token's posterior is then ``alpha * beta`` divided by its own
        sum ``lam``, and the exact scaled backward variable is ``beta / lam``.
        """
        K, N = A.shape[0], A.shape[1]
        # backward vector leaving each lane, up to a factor
        b_out = np.full((K, N, self.n_lanes), 1.0 / N)
        with np.errstate(invalid="ignore", divide="ignore", under="ignore"):
            for k in range(len(self.chains) - 1, 0, -1):
                lanes = self.chains[k]
                prev = self.chains[k - 1][:len(lanes)]
                v = np.einsum("kijm,kjm->kim", P[..., self.tr_index[lanes]], b_out[:, :, lanes])
                b_out[:, :, prev] = v / np.maximum(v.sum(axis=1, keepdims=True), _TINY)
        T = self.n_tokens
        gamma = np.empty((K, N, T))
        xi = np.zeros((K, N, N))
        steps = len(self.active)
        beta = None                                  # backward vectors of the later block
        with np.errstate(invalid="ignore", divide="ignore", under="ignore", over="ignore"):
            for t in range(steps - 1, -1, -1):
                k = int(self.active[t])
                lo = int(self.block[t])
                k1 = int(self.active[t + 1]) if t + 1 < steps else 0
                cur = np.empty((K, N, k))
                if k1:
                    hi = int(self.block[t + 1])
                    w = self._finish_block(alpha, beta, E, c, gamma, hi, k1)
                    u = cur[:, :, :k1]
                    np.matmul(A, w, out=u)
                    u /= np.maximum(u.sum(axis=1, keepdims=True), _TINY)
                    xi += np.matmul(alpha[:, :, lo:lo + k1], w.transpose(0, 2, 1))
                if k > k1:
                    cur[:, :, k1:k] = b_out[:, :, k1:k]
                beta = cur
            if steps:
                w = self._finish_block(alpha, beta, E, c, gamma, 0, self.n_lanes)
                # pairs across lane ends: last token of a lane, first token of the next
                if len(self.later):
                    xi += np.matmul(alpha[:, :, self.pred_last],
                                    w[:, :, self.later].transpose(0, 2, 1))
        return gamma, xi

    @staticmethod
    def _finish_block(alpha, beta, E, c, gamma, lo, k):
        """Posteriors of slots ``lo:lo+k`` into ``gamma``; returns
        ``b(o) * beta_hat / c`` of those slots (the exact scaled backward variable
        ``beta_hat = beta / lam``)."""
        g = gamma[:, :, lo:lo + k]
        np.multiply(alpha[:, :, lo:lo + k], beta, out=g)
        lam = np.maximum(g.sum(axis=1), _TINY)
        g /= lam[:, None, :]
        w = E[:, :, lo:lo + k] * beta
        lam *= np.maximum(c[:, lo:lo + k], _TINY)
        w /= lam[:, None, :]
        return w


_TINY = 1e-300


def _stack(startprob, transmat, emissionprob):
    pi = np.atleast_2d(np.asarray(startprob, dtype=np.float64))
    A = np.asarray(transmat, dtype=np.float64)
    B = np.asarray(emissionprob, dtype=np.float64)
    if A.ndim == 2:
        A = A[None]
    if B.ndim == 2:
        B = B[None]
    return pi, A, B
