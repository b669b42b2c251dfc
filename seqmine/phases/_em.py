"""Baum--Welch for categorical hidden Markov models: start points, accelerated EM, restarts.

The E-step is :class:`~seqmine.phases._lanes.Lanes` (numpy forward--backward on many
sequences and several models at once); the M-step is the usual maximum-likelihood
update (Rabiner 1989, eqs. 40a-c). EM is accelerated by SQUAREM (Varadhan & Roland
2008, scheme S3, in the probability parameters): two EM steps give a direction and a
step length, the step is shortened until no probability is negative, and the
extrapolated point is accepted only when its log-likelihood is at least that of the
plain EM step, so the fit never ends below where plain EM would be. EM stops when a
plain EM step gains less than ``tol`` in total log-likelihood (an absolute change,
like hmmlearn's ``tol``) in ``patience`` consecutive cycles, or after ``max_iter``
E-steps.

Start points (``start_point``):

- ``"clustered"``: each token is described by its symbol and the symbols just before
  and after it; weighted k-means (k-means++ seeding, Lloyd iterations; best of four
  seedings) groups these contexts into ``n_states`` clusters, and start, transition
  and emission probabilities are counted from the cluster labels (with
  pseudo-counts), as in segmental k-means (Juang & Rabiner 1990);
- ``"random"``: start and transition rows ``Dirichlet(1/N)``, emission rows uniform
  random numbers normalised (hmmlearn's default start);
- ``"sticky"``: transition rows ``0.5 I + 0.5 Dirichlet(1)``, emission rows
  ``0.8 Dirichlet(1) + 0.2 f`` with ``f`` the token frequencies;
- splits (:func:`split_start`): a fitted model with one state fewer with one of its
  states split in two (the halves leave mostly to different next states, their
  emission rows tilted two opposite ways); used when state counts are fitted in turn.

References
----------
Rabiner, L. R. (1989). A tutorial on hidden Markov models and selected applications
in speech recognition. Proceedings of the IEEE 77(2), 257-286.

Varadhan, R. & Roland, C. (2008). Simple and globally convergent methods for
accelerating the convergence of any EM algorithm. Scandinavian Journal of
Statistics 35(2), 335-353.

Juang, B.-H. & Rabiner, L. R. (1990). The segmental K-means algorithm for estimating
parameters of hidden Markov models. IEEE Transactions on Acoustics, Speech, and
Signal Processing 38(9), 1639-1641.
"""

from __future__ import annotations

import numpy as np

__all__ = ["START_KINDS", "start_point", "baum_welch", "split_start"]

#: Kinds of start point, in the order restarts cycle through them.
START_KINDS = ("clustered", "random", "sticky")

_FLOOR = 1e-300


def start_point(kind, X, lengths, n_states, n_symbols, rng):
    """Start parameters ``(startprob, transmat, emissionprob)`` of one kind.

    Parameters
    ----------
    kind : {"clustered", "random", "sticky"}
    X : ndarray of int, shape (n_tokens,)
    lengths : ndarray of int
    n_states, n_symbols : int
    rng : numpy.random.Generator

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = np.array([0, 0, 0, 1, 1, 1, 0, 0, 1, 1])
    >>> pi, A, B = start_point("clustered", X, np.array([10]), 2, 2, rng)
    >>> A.shape, B.shape, bool(np.allclose(B.sum(axis=1), 1))
    ((2, 2), (2, 2), True)
    """
    N, M = int(n_states), int(n_symbols)
    X = np.asarray(X, dtype=np.int64)
    if kind == "random":
        pi = rng.dirichlet(np.full(N, 1.0 / N))
        A = rng.dirichlet(np.full(N, 1.0 / N), size=N)
        B = rng.random((N, M))
        B /= B.sum(axis=1, keepdims=True)
        return _clean(pi), _clean(A), _clean(B)
    if kind == "sticky":
        freq = np.bincount(X, minlength=M).astype(np.float64)
        freq = (freq + 1e-3) / (freq.sum() + 1e-3 * M)
        pi = rng.dirichlet(np.ones(N))
        A = 0.5 * np.eye(N) + 0.5 * rng.dirichlet(np.ones(N), size=N)
        B = 0.8 * rng.dirichlet(np.ones(M), size=N) + 0.2 * freq[None, :]
        return _clean(pi), _clean(A), _clean(B)
    if kind == "clustered":
        return _clustered(X, np.asarray(lengths, dtype=np.int64), N, M, rng)
    raise ValueError(f"unknown start kind {kind!r}")


def split_start(startprob, transmat, emissionprob, state, rng):
    """Start with one state more: ``state`` of a fitted model split in two.

    The halves share the state's start probability and incoming transitions; one
    half leaves mostly to the state's most likely successor and the other mostly to
    the rest (outgoing rows tilted by a factor 3), and their emission rows are the
    state's row tilted two opposite ways by random factors ``exp(+-0.3 z)``. A
    state that stands for the same tokens in two contexts (e.g. a pause before
    setting up and a pause before measuring) can so come apart.
    """
    pi = np.asarray(startprob, dtype=np.float64)
    A = np.asarray(transmat, dtype=np.float64)
    B = np.asarray(emissionprob, dtype=np.float64)
    N = len(pi)
    s = int(state)
    idx = np.append(np.arange(N), s)
    pi2 = pi[idx].copy()
    pi2[[s, N]] *= 0.5
    A2 = A[np.ix_(idx, idx)].copy()
    A2[:, [s, N]] *= 0.5
    row = A[s].copy()
    row[s] = 0.0
    top = int(np.argmax(row)) if row.sum() > 0 else (s + 1) % N
    tilt = np.ones(N + 1)
    tilt[top] = 3.0
    A2[s] *= tilt
    A2[N] /= tilt
    z = rng.standard_normal(B.shape[1])
    B2 = B[idx].copy()
    B2[s] *= np.exp(0.3 * z)
    B2[N] *= np.exp(-0.3 * z)
    return _clean(pi2), _clean(A2), _clean(B2)


def baum_welch(lanes, startprob, transmat, emissionprob, *, max_iter=500, tol=0.01,
               accelerate=True, patience=2, race=None):
    """Fit several models on the same data by (accelerated) EM, side by side.

    Parameters
    ----------
    lanes : Lanes
        The training data.
    startprob, transmat, emissionprob : ndarray
        Start points stacked over models: (K, N), (K, N, N), (K, N, M).
    max_iter : int
        Most E-steps per model.
    tol : float
        A model has converged when a plain EM step gains less than ``tol`` (absolute,
        total log-likelihood) ``patience`` times in a row (with acceleration: in
        ``patience`` consecutive cycles), so a short flat stretch does not stop it.
    accelerate : bool
        SQUAREM extrapolation (the default) or plain EM.
    patience : int
    race : float, optional
        When several models run side by side to pick one, stop a model as soon as its
        log-likelihood trails the best by more than this share of the best's absolute
        value (it is left unconverged; the caller keeps the best).

    Returns
    -------
    dict
        ``startprob``, ``transmat``, ``emissionprob`` (stacked fitted parameters),
        ``loglik`` (K,) the best log-likelihood evaluated (the returned parameters
        are one M-step past that point, so at least as good), ``n_iter`` (K,)
        E-steps run and ``converged`` (K,) bool.
    """
    theta = [np.array(a, dtype=np.float64, copy=True) for a in
             (startprob, transmat, emissionprob)]
    K = theta[0].shape[0]
    loglik = np.full(K, -np.inf)
    n_iter = np.zeros(K, dtype=np.int64)
    calm = np.zeros(K, dtype=np.int64)           # consecutive small gains
    converged = np.zeros(K, dtype=bool)
    step_max = np.ones(K)
    result = [a.copy() for a in theta]
    max_iter = int(max_iter)
    patience = max(1, int(patience))
    active = np.arange(K)
    while len(active):
        cur = [a[active] for a in theta]
        left = max_iter - int(n_iter[active].max())
        if not accelerate or left < 3:
            l0, nxt = _em_step(lanes, cur)
            n_iter[active] += 1
            gained = l0 - loglik[active]
            loglik[active] = np.maximum(loglik[active], l0)
            calm[active] = np.where(gained < tol, calm[active] + 1, 0)
            done = calm[active] >= patience
            converged[active[done]] = True
            done |= (n_iter[active] >= max_iter) | ~np.isfinite(l0)
            for a, b in zip(theta, nxt):
                a[active] = b
            for r, b in zip(result, nxt):
                r[active[done]] = b[done]
            active = active[~done]
            continue
        # one SQUAREM cycle: theta1 = F(theta0), theta2 = F(theta1), extrapolate to
        # theta', keep F(theta') when theta' is at least as good as theta1, else theta2
        l0, th1 = _em_step(lanes, cur)
        l1, th2 = _em_step(lanes, th1)
        n_iter[active] += 2
        loglik[active] = np.maximum(loglik[active], np.maximum(l0, l1))
        calm[active] = np.where(l1 - l0 < tol, calm[active] + 1, 0)
        done = calm[active] >= patience
        converged[active[done]] = True
        done |= ~np.isfinite(l1)
        for r, b in zip(result, th2):
            r[active[done]] = b[done]
        keep = ~done
        idx = active[keep]
        if not len(idx):
            break
        cur = [a[keep] for a in cur]
        th1 = [a[keep] for a in th1]
        th2 = [a[keep] for a in th2]
        l1 = l1[keep]
        ext, steps = _extrapolate(cur, th1, th2, step_max[idx])
        l3, th4 = _em_step(lanes, ext)
        n_iter[idx] += 1
        ok = np.isfinite(l3) & (l3 >= l1)
        loglik[idx] = np.maximum(loglik[idx], np.where(ok, l3, -np.inf))
        # the step bound grows while long steps pay off and shrinks after a failure
        step_max[idx] = np.where(ok, np.where(steps >= step_max[idx], 4.0 * step_max[idx],
                                              step_max[idx]),
                                 np.maximum(1.0, step_max[idx] / 4.0))
        for a, b4, b2 in zip(theta, th4, th2):
            a[idx] = np.where(ok.reshape((-1,) + (1,) * (b4.ndim - 1)), b4, b2)
        out = n_iter[idx] >= max_iter
        if race is not None:
            lead = loglik.max()
            out |= loglik[idx] < lead - race * abs(lead)
        for r, a in zip(result, theta):
            r[idx[out]] = a[idx[out]]
        active = idx[~out]
    return {"startprob": result[0], "transmat": result[1], "emissionprob": result[2],
            "loglik": loglik, "n_iter": n_iter, "converged": converged}


# ----------------------------------------------------------------- helpers
def _em_step(lanes, theta):
    """One E-step and M-step for every model: (log-likelihood of theta, new theta)."""
    pi, A, B = theta
    stats = lanes.estep(pi, A, B)
    return stats["loglik"], _mstep(stats, theta)


def _mstep(stats, theta):
    pi, A, B = theta
    new = []
    for s, old in ((stats["start"], pi), (stats["trans"], A), (stats["emit"], B)):
        tot = s.sum(axis=-1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            p = s / tot
        # a state never reached keeps its previous row
        new.append(np.where(tot > 0, p, old))
    return new


def _extrapolate(th0, th1, th2, step_max):
    """SQUAREM step (scheme S3): ``theta0 + 2 s r + s^2 v`` with ``r = theta1 - theta0``,
    ``v = theta2 - 2 theta1 + theta0`` and ``s = |r| / |v|`` (at least 1, at most
    ``step_max``); rows stay on the simplex because the step is shortened (towards
    ``s = 1``, which gives ``theta2``) until no probability is negative."""
    K = th0[0].shape[0]
    rr = np.zeros(K)
    vv = np.zeros(K)
    rs, vs = [], []
    for a0, a1, a2 in zip(th0, th1, th2):
        r = a1 - a0
        v = a2 - 2.0 * a1 + a0
        ax = tuple(range(1, r.ndim))
        rr += (r * r).sum(axis=ax)
        vv += (v * v).sum(axis=ax)
        rs.append(r)
        vs.append(v)
    with np.errstate(divide="ignore", invalid="ignore"):
        step = np.sqrt(rr / vv)
    step = np.where(np.isfinite(step), np.clip(step, 1.0, step_max), 1.0)
    # largest step in [1, step] that keeps every probability >= 0
    for a0, r, v in zip(th0, rs, vs):
        shape = (-1,) + (1,) * (a0.ndim - 1)
        for _ in range(30):
            s = step.reshape(shape)
            bad = ((a0 + 2.0 * s * r + s * s * v) < 0).reshape(K, -1).any(axis=1)
            if not bad.any():
                break
            step = np.where(bad, np.maximum(1.0, 0.5 * (step + 1.0)), step)
        else:
            step = np.where(bad, 1.0, step)
    out = []
    for a0, r, v in zip(th0, rs, vs):
        s = step.reshape((-1,) + (1,) * (a0.ndim - 1))
        p = np.maximum(a0 + 2.0 * s * r + s * s * v, 0.0)
        out.append(p / p.sum(axis=-1, keepdims=True))
    return out, step


def _clean(p):
    p = np.maximum(np.asarray(p, dtype=np.float64), 1e-12)
    return p / p.sum(axis=-1, keepdims=True)


def _clustered(X, lengths, N, M, rng):
    """Segmental k-means style start from the tokens' immediate contexts.

    Each token is described by its own symbol (weight 1) and the symbols just
    before and after it in its sequence (weight 1/2 each; a sequence edge counts as
    an extra symbol). Weighted k-means on the distinct descriptions puts the tokens
    into ``N`` clusters; start, transition and emission probabilities are counted
    from the cluster labels with pseudo-counts (1 for start and transitions, 1/2
    for emissions).
    """
    T = len(X)
    if T == 0:
        return np.full(N, 1.0 / N), np.full((N, N), 1.0 / N), np.full((N, M), 1.0 / M)
    offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    seq = np.repeat(np.arange(len(lengths)), lengths)
    same = seq[1:] == seq[:-1]
    prev = np.full(T, M)
    nxt = np.full(T, M)
    prev[1:][same] = X[:-1][same]
    nxt[:-1][same] = X[1:][same]
    key = (X * (M + 1) + prev) * (M + 1) + nxt
    uniq, inverse, counts = np.unique(key, return_inverse=True, return_counts=True)
    rows = np.arange(len(uniq))
    feats = np.zeros((len(uniq), 3 * (M + 1)))
    feats[rows, uniq // (M + 1) ** 2] = 1.0
    feats[rows, M + 1 + (uniq // (M + 1)) % (M + 1)] = 0.5
    feats[rows, 2 * (M + 1) + uniq % (M + 1)] = 0.5
    label = _kmeans(feats, counts.astype(np.float64), N, rng)[inverse.ravel()]
    first = offsets[:-1][lengths > 0]
    pi = np.bincount(label[first], minlength=N) + 1.0
    A = np.bincount(label[:-1][same] * N + label[1:][same], minlength=N * N).reshape(N, N)
    B = np.bincount(label * M + X, minlength=N * M).reshape(N, M) + 0.5
    return _clean(pi), _clean(A + 1.0), _clean(B)


def _kmeans(points, weights, k, rng, n_init=4):
    """Weighted k-means: the best (least weighted inertia) of ``n_init`` runs of
    k-means++ seeding and Lloyd iterations; returns the labels."""
    best, best_cost = None, np.inf
    for _ in range(n_init):
        label, cost = _kmeans_once(points, weights, k, rng)
        if cost < best_cost - 1e-12:
            best, best_cost = label, cost
    return best


def _kmeans_once(points, weights, k, rng, n_iter=50):
    n = len(points)
    w = weights / weights.sum()
    centres = np.empty((k, points.shape[1]))
    centres[0] = points[rng.choice(n, p=w)]
    d2 = ((points - centres[0]) ** 2).sum(axis=1)
    for j in range(1, k):
        p = w * d2
        total = p.sum()
        centres[j] = points[rng.choice(n, p=p / total) if total > 0 else rng.integers(n)]
        d2 = np.minimum(d2, ((points - centres[j]) ** 2).sum(axis=1))
    label = np.zeros(n, dtype=np.int64)
    for _ in range(n_iter):
        d = ((points[:, None, :] - centres[None]) ** 2).sum(axis=2)
        label = np.argmin(d, axis=1)
        new = centres.copy()
        for j in range(k):
            m = label == j
            if m.any():
                new[j] = (points[m] * weights[m, None]).sum(axis=0) / weights[m].sum()
        if np.allclose(new, centres):
            break
        centres = new
    d = ((points[:, None, :] - centres[None]) ** 2).sum(axis=2)
    label = np.argmin(d, axis=1)
    return label, float((weights * d[np.arange(n), label]).sum())


