"""Fitting phase models: Baum--Welch restarts and choice of the number of states.

How a model is fitted (:func:`fit_phase_model`): ``n_restarts`` start points of
different kinds (a clustering of the tokens' contexts, hmmlearn-style random
Dirichlet rows, a sticky start; see :mod:`._em`) run side by side for a few EM
steps; the one with the highest log-likelihood is then run to convergence by
SQUAREM-accelerated EM, which stops when a plain EM step gains less than ``tol``
(absolute total log-likelihood) twice in a row, or after ``n_iter`` E-steps.

How the state count is chosen (:func:`select_n_states`): every count in the range
is fitted on all sequences (BIC) and, for the held-out score, on the learners
outside one held-out fold; the held-out fold is scored by the model fitted
without it. The model on all sequences starts from that training fit, so each
count costs one search for a good optimum plus a short refinement.
"""

from __future__ import annotations

import functools
import math
import warnings

import numpy as np
import pandas as pd

from .._util.checks import check_int, check_jobs, check_number
from .._util.folds import learner_splits
from .._util.parallel import parallel_map
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import ParameterError, SeqmineWarning
from . import _hmm
from ._em import START_KINDS, baum_welch, split_start, start_point
from ._lanes import Lanes
from .model import PhaseModel

__all__ = ["fit_phase_model", "select_n_states", "parse_state_range", "frequency_loglik"]

#: Default additive emission smoothing (see :func:`_hmm.apply_emission_floor`).
DEFAULT_EMISSION_FLOOR = 1e-4
_DEFAULTS = DEFAULT_CONFIG["phases"]
#: E-steps every start runs before the best one is run to convergence.
SCREEN_ITER = 9
#: The two best starts run on side by side until one trails the other by more than this
#: share of the log-likelihood (the quality the tests ask for is 0.5 % of hmmlearn's
#: best of five fits).
RACE_GAP = 0.005
#: Screening runs on a seeded sample of whole sequences of about this many tokens when
#: the data are larger (it only has to rank the starts).
SCREEN_TOKENS = 40_000


def fit_phase_model(sequences, *, n_states=3, n_restarts=_DEFAULTS["n_restarts"],
                    random_state=DEFAULT_CONFIG["seed"], n_jobs=DEFAULT_CONFIG["n_jobs"],
                    n_iter=_DEFAULTS["n_iter"], tol=_DEFAULTS["tol"],
                    emission_floor=DEFAULT_EMISSION_FLOOR, vocab=None, label="model",
                    start=None):
    """Fit one categorical HMM by Baum--Welch from several starts; keep the best.

    Start ``r`` is of kind ``START_KINDS[r % 3]`` (``"clustered"``, ``"random"``,
    ``"sticky"``), drawn from a seed derived from ``(random_state, stream, n_states,
    restart)`` (stream 0 here; the pooled and group models of
    :func:`~seqmine.phases.fit_phases` use their own streams). Without ``start``, the
    models with 2, 3, ... states are fitted first and each count also starts from
    every split of the previous count's fit (EM on these data has many poor local
    optima; this finds the good ones far more often). All starts of one count run
    :data:`SCREEN_ITER` accelerated EM steps side by side; the two with the highest
    log-likelihood run on until EM converges (a start that falls more than
    :data:`RACE_GAP` of the log-likelihood behind the other is stopped early), and the
    better of these (ties: the lower restart number) is kept. States of the result are
    put in a canonical order: decreasing expected occupancy.

    Parameters
    ----------
    sequences : SequenceDB or list of int arrays
        Token ids; with a list, ``vocab`` (or the largest id) fixes the vocabulary.
    n_states : int
    n_restarts : int
        Number of starts of the kinds above (besides ``start`` when given; then 0 is
        allowed).
    random_state : int
    n_jobs : int
        Accepted for symmetry with :func:`select_n_states`; the starts of one fit
        run side by side in one process.
    n_iter : int
        Most EM steps (E-steps, screening included).
    tol : float
        Convergence threshold: absolute gain of the total log-likelihood per EM
        step (twice in a row).
    emission_floor : float
        Additive smoothing of emission rows, ``(b + floor) / (1 + M floor)``, so a
        token unseen in the training data keeps a small probability.
    vocab : list of str, optional
    label : str
    start : PhaseModel or (startprob, transmat, emissionprob), optional
        A start point tried first (e.g. a model fitted on related data).

    Returns
    -------
    PhaseModel

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "a", "b", "b"], ["a", "b", "b", "b"]] * 5)
    >>> m = fit_phase_model(db, n_states=2, n_restarts=2, random_state=1)
    >>> m.n_states, m.vocab
    (2, ['a', 'b'])
    """
    return _fit_phase_model(sequences, n_states=n_states, n_restarts=n_restarts,
                            random_state=random_state, n_jobs=n_jobs, n_iter=n_iter, tol=tol,
                            emission_floor=emission_floor, vocab=vocab, label=label,
                            start=start, stream=0)


def _fit_phase_model(sequences, *, n_states, n_restarts, random_state, n_jobs, n_iter, tol,
                     emission_floor, vocab, label, stream, start=None):
    """:func:`fit_phase_model` drawing its starts from random stream ``stream``."""
    where = "fit_phase_model"
    seed = random_state
    X, lengths, vocab = _arrays(sequences, vocab)
    n_states = check_int(n_states, "n_states", where, minimum=1)
    n_restarts = check_int(n_restarts, "n_restarts", where,
                           minimum=1 if start is None else 0)
    check_jobs(n_jobs, "n_jobs", where)
    n_iter = check_int(n_iter, "n_iter", where, minimum=1)
    tol = check_number(tol, "tol", where, minimum=0)
    emission_floor = check_number(emission_floor, "emission_floor", where, minimum=0)
    _check_supported(n_states, len(vocab), len(X), label)
    opts = dict(n_restarts=n_restarts, n_iter=n_iter, tol=tol, emission_floor=emission_floor)
    if start is None:
        # fewer states first, so that each count can also start from splits of the last
        fit = _fit_counts(X, lengths, len(vocab), [n_states], (seed, stream, 0), opts)[n_states]
    else:
        fit = _fit_best(X, lengths, len(vocab), n_states, seed_parts=(seed, stream, n_states, 0),
                        starts=[_as_start(start, n_states, len(vocab))], **opts)
    return _best_model(fit, X, lengths, vocab, label, emission_floor, seed, n_restarts)


def select_n_states(sequences, *,
                    n_states=range(_DEFAULTS["min_states"], _DEFAULTS["max_states"] + 1),
                    n_restarts=_DEFAULTS["n_restarts"], n_splits=_DEFAULTS["n_splits"],
                    all_splits=_DEFAULTS["all_splits"], random_state=DEFAULT_CONFIG["seed"],
                    n_jobs=DEFAULT_CONFIG["n_jobs"], n_iter=_DEFAULTS["n_iter"],
                    tol=_DEFAULTS["tol"], emission_floor=DEFAULT_EMISSION_FLOOR, learners=None,
                    vocab=None, label="pooled"):
    """Fit every state count in a range; score it by BIC and held-out log-likelihood.

    Held-out log-likelihood: learners are dealt into ``n_splits`` folds (sequences
    of one learner stay together). By default one fold is held out: a model is
    fitted (with restarts) on the other folds and scores the held-out fold; with
    ``all_splits=True`` every fold is held out in turn (``n_splits`` fits per count)
    and the scores are added. The state counts are fitted in increasing order, each
    also from every split of the previous count's fit. The model on all sequences,
    which BIC scores, starts from the training fit of the first fold. State counts
    whose free parameters reach the number of tokens are dropped with a
    :class:`SeqmineWarning`.

    Returns
    -------
    table : pandas.DataFrame
        One row per state count: ``model``, ``n_states``, ``n_parameters``,
        ``n_observations``, ``log_likelihood``, ``loglik_per_token``, ``bic``,
        ``heldout_loglik`` (summed over the held-out folds),
        ``heldout_loglik_per_token``, ``train_loglik_per_token`` (the training fits
        on their own sequences), ``heldout_gain_per_token`` and
        ``train_gain_per_token`` (the same minus the log-likelihood of the training
        learners' token frequencies, so that a held-out fold with an easier mix of
        tokens does not look better fitted), ``n_iter`` (E-steps of the model on all sequences),
        ``converged``, ``best_bic``, ``best_heldout`` (bool: the count chosen by each
        criterion).
    models : dict int -> PhaseModel
        The model fitted on all sequences for each state count.
    """
    return _select_n_states(sequences, n_states=n_states, n_restarts=n_restarts,
                            n_splits=n_splits, all_splits=all_splits, random_state=random_state,
                            n_jobs=n_jobs, n_iter=n_iter, tol=tol,
                            emission_floor=emission_floor, learners=learners, vocab=vocab,
                            label=label, stream=0)


def _select_n_states(sequences, *, n_states, n_restarts, n_splits, all_splits, random_state,
                     n_jobs, n_iter, tol, emission_floor, learners, vocab, label, stream):
    """:func:`select_n_states` drawing its starts from random stream ``stream``."""
    where = "select_n_states"
    seed = random_state
    X, lengths, vocab = _arrays(sequences, vocab)
    counts = parse_state_range(n_states)
    n_restarts = check_int(n_restarts, "n_restarts", where, minimum=1)
    n_jobs = check_jobs(n_jobs, "n_jobs", where)
    n_folds = check_int(n_splits, "n_splits", where, minimum=0)
    n_iter = check_int(n_iter, "n_iter", where, minimum=1)
    tol = check_number(tol, "tol", where, minimum=0)
    if n_folds == 1:
        raise ParameterError("The 'n_splits' parameter of select_n_states must be 0 (no "
                             "held-out score) or at least 2. Got 1 instead.")
    M = len(vocab)
    supported = [n for n in counts if _hmm.n_free_parameters(n, M) < len(X)]
    if not supported:
        n0 = counts[0]
        raise ParameterError(
            f"The {label} data ({len(X)} tokens) cannot support {n0} states: that model has "
            f"{_hmm.n_free_parameters(n0, M)} free parameters. Lower "
            f"'n_states' (--states) or provide more sequences.")
    if len(supported) < len(counts):
        dropped = [n for n in counts if n not in supported]
        warnings.warn(SeqmineWarning(
            f"State counts {dropped} have as many free parameters as the {len(X)} {label} "
            f"tokens and were skipped; the range was capped at {max(supported)} states.",
            code="state_counts_skipped", count=len(dropped)), stacklevel=2)
    counts = supported
    splits = []
    if n_folds:
        fold_of = _learner_folds(learners if learners is not None else
                                 np.arange(len(lengths)).astype(str), n_folds, seed)
        offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        for f in range(n_folds if all_splits else 1):
            splits.append((_take(X, offsets, lengths, np.flatnonzero(fold_of != f)),
                           _take(X, offsets, lengths, np.flatnonzero(fold_of == f))))
    opts = dict(n_restarts=n_restarts, n_iter=n_iter, tol=tol, emission_floor=emission_floor)
    if splits:
        train = parallel_map(functools.partial(_fit_counts_job, n_symbols=M, counts=counts,
                                               opts=opts),
                             [(Xtr, Ltr, (seed, stream, f + 1))
                              for f, ((Xtr, Ltr), _) in enumerate(splits)], n_jobs=n_jobs)
        held = {n: [] for n in counts}
        for fits, ((Xtr, _), (Xho, Lho)) in zip(train, splits):
            lanes = Lanes(Xho, Lho, M)
            # the token frequencies of the training learners, scored on both sides
            freq = _frequencies(Xtr, M, emission_floor)
            base_tr = float(np.log(freq)[Xtr].sum())
            base_ho = float(np.log(freq)[Xho].sum())
            for n, fit in fits.items():
                ho = float(lanes.loglik(fit["startprob"], fit["transmat"],
                                        fit["emissionprob"]).sum())
                held[n].append({"heldout_loglik": ho, "heldout_tokens": len(Xho),
                                "train_loglik": fit["loglik"], "train_tokens": len(Xtr),
                                "heldout_gain": ho - base_ho,
                                "train_gain": fit["loglik"] - base_tr})
        full = dict(zip(counts, parallel_map(
            functools.partial(_refine, X, lengths, M, opts=opts),
            [train[0][n] for n in counts], n_jobs=n_jobs)))
    else:
        full = _fit_counts(X, lengths, M, counts, (seed, stream, 0), opts)
        held = {n: [] for n in counts}
    outs = [(full[n], held[n]) for n in counts]
    rows, models = [], {}
    for n, (fit, held) in zip(counts, outs):
        model = _best_model(fit, X, lengths, vocab, label, emission_floor, seed, n_restarts)
        models[n] = model
        k = model.n_free_parameters
        row = {"model": label, "n_states": n, "n_parameters": k, "n_observations": len(X),
               "log_likelihood": model.log_likelihood,
               "loglik_per_token": model.log_likelihood / max(len(X), 1),
               "bic": -2.0 * model.log_likelihood + k * math.log(len(X)),
               "heldout_loglik": float("nan"), "heldout_loglik_per_token": float("nan"),
               "train_loglik_per_token": float("nan"),
               "heldout_gain_per_token": float("nan"), "train_gain_per_token": float("nan"),
               "n_iter": int(fit["n_iter"]), "converged": bool(fit["converged"])}
        if held:
            ho_ll = sum(h["heldout_loglik"] for h in held)
            ho_n = sum(h["heldout_tokens"] for h in held)
            tr_ll = sum(h["train_loglik"] for h in held)
            tr_n = sum(h["train_tokens"] for h in held)
            row.update(heldout_loglik=ho_ll, heldout_loglik_per_token=ho_ll / max(ho_n, 1),
                       train_loglik_per_token=tr_ll / max(tr_n, 1),
                       heldout_gain_per_token=sum(h["heldout_gain"] for h in held) / max(ho_n, 1),
                       train_gain_per_token=sum(h["train_gain"] for h in held) / max(tr_n, 1))
        rows.append(row)
    table = pd.DataFrame(rows)
    table["best_bic"] = table["bic"] == table["bic"].min()
    if n_folds:
        table["best_heldout"] = table["heldout_loglik"] == table["heldout_loglik"].max()
    else:
        table["best_heldout"] = False
    _first_only(table, "best_bic")
    _first_only(table, "best_heldout")
    return table, models


def _frequencies(X, n_symbols, emission_floor):
    counts = np.bincount(X, minlength=n_symbols).astype(np.float64)
    share = counts / max(counts.sum(), 1.0)
    return _hmm.apply_emission_floor(share[None, :], emission_floor)[0]


def frequency_loglik(sequences, *, emission_floor=DEFAULT_EMISSION_FLOOR, vocab=None):
    """Log-likelihood of the sequences under their own token frequencies.

    The baseline every phase model should beat clearly: a one-state model whose
    emission row is the (floored) share of each token, i.e. tokens drawn
    independently of each other.

    Examples
    --------
    >>> round(frequency_loglik([[0, 0, 1, 1]], emission_floor=0), 6)  # 4 log(1/2)
    -2.772589
    """
    X, _, vocab = _arrays(sequences, vocab)
    if len(X) == 0:
        return 0.0
    with np.errstate(divide="ignore"):
        return float(np.log(_frequencies(X, len(vocab), emission_floor))[X].sum())


def _learner_folds(learners, n_splits, random_state):
    """Fold number of each sequence for held-out scoring; a learner's sequences share one.

    Examples
    --------
    >>> _learner_folds(["a", "b", "a", "c"], 2, 0).tolist()
    [1, 0, 1, 0]
    """
    n_learners = len(np.unique(np.asarray(learners).astype(str)))
    if n_learners < n_splits:
        raise ParameterError(
            f"Held-out scoring needs at least {n_splits} learners (one per fold) but the data "
            f"has {n_learners}; lower 'n_splits' (0 switches held-out scoring off).")
    fold_of = np.empty(len(learners), dtype=np.int64)
    splits = learner_splits(learners, n_splits=n_splits,
                            random_state=_hmm.derive_seed(random_state, 7919),
                            where="select_n_states")
    for f, (_, test) in enumerate(splits):
        fold_of[test] = f
    return fold_of


def parse_state_range(value):
    """Sorted distinct state counts from an int, an iterable, or a ``"2-6"`` string.

    Examples
    --------
    >>> parse_state_range("2-4"), parse_state_range(3), parse_state_range(range(2, 5))
    ([2, 3, 4], [3], [2, 3, 4])
    """
    where = "fit_phases"
    if isinstance(value, str):
        text = value.strip()
        try:
            if "-" in text:
                lo, hi = (int(p) for p in text.split("-", 1))
                counts = list(range(lo, hi + 1))
            else:
                counts = [int(p) for p in text.split(",")]
        except ValueError:
            raise ParameterError(
                f"The 'n_states' parameter of {where} must look like '3', '2-6' or '2,3,5'. "
                f"Got {value!r} instead.") from None
    elif isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        counts = [int(value)]
    else:
        try:
            counts = [int(v) for v in value]
        except (TypeError, ValueError):
            raise ParameterError(
                f"The 'n_states' parameter of {where} must be an int, a range or a list of "
                f"ints. Got {value!r} instead.") from None
    counts = sorted(set(counts))
    if not counts or counts[0] < 1:
        raise ParameterError(
            f"The 'n_states' parameter of {where} must hold state counts >= 1. "
            f"Got {value!r} instead.")
    return counts


# ----------------------------------------------------------------- helpers
def _arrays(sequences, vocab=None):
    if isinstance(sequences, SequenceDB):
        return (sequences.tokens.astype(np.int64), sequences.lengths,
                list(sequences.vocab) if vocab is None else list(vocab))
    seqs = [np.asarray(s, dtype=np.int64).ravel() for s in sequences]
    lengths = np.array([len(s) for s in seqs], dtype=np.int64)
    X = np.concatenate(seqs) if seqs else np.zeros(0, dtype=np.int64)
    if vocab is None:
        vocab = [str(j) for j in range(int(X.max()) + 1 if len(X) else 1)]
    if len(X) and (X.min() < 0 or X.max() >= len(vocab)):
        raise ParameterError(
            f"Token ids must lie in 0..{len(vocab) - 1} (the vocabulary); got "
            f"{int(X.min())}..{int(X.max())}.")
    return X, lengths, list(vocab)


def _check_supported(n_states, n_symbols, n_tokens, label):
    k = _hmm.n_free_parameters(n_states, n_symbols)
    if k >= n_tokens:
        raise ParameterError(
            f"The {label} data ({n_tokens} tokens) cannot support {n_states} states: that "
            f"model has {k} free parameters. Lower 'n_states' (--states) or provide more "
            f"sequences.")


def _take(X, offsets, lengths, idx):
    """Tokens and lengths of the sequences ``idx`` (in increasing order)."""
    keep = np.zeros(len(lengths), dtype=bool)
    keep[idx] = True
    return X[np.repeat(keep, lengths)], lengths[keep]


def _as_start(start, n_states, n_symbols):
    if isinstance(start, PhaseModel):
        start = (start.startprob, start.transmat, start.emissionprob)
    pi, A, B = (np.asarray(a, dtype=np.float64) for a in start)
    if pi.shape != (n_states,) or A.shape != (n_states, n_states) or B.shape != (
            n_states, n_symbols):
        raise ParameterError(
            f"The start model has {len(pi)} states and {B.shape[-1]} tokens; it must have "
            f"{n_states} states and {n_symbols} tokens.")
    return pi, A, B


def _fit_best(X, lengths, n_symbols, n_states, *, seed_parts, starts, n_restarts, n_iter,
              tol, emission_floor, lanes=None, screen_lanes=None):
    """Screen the starts side by side, run the best to convergence, floor emissions."""
    lanes = lanes if lanes is not None else Lanes(X, lengths, n_symbols)
    if screen_lanes is None:
        screen_lanes = _screen_lanes(X, lengths, n_symbols, lanes, seed_parts)
    cands = [s[:3] for s in starts]
    kinds = [s[3] if len(s) > 3 else "given" for s in starts]
    for r in range(n_restarts):
        kind = START_KINDS[r % len(START_KINDS)]
        rng = np.random.default_rng(_hmm.derive_seed(*seed_parts, r))
        cands.append(start_point(kind, X, lengths, n_states, n_symbols, rng))
        kinds.append(kind)
    stacked = [np.stack([c[j] for c in cands]) for j in range(3)]
    screened = []
    alive = np.arange(len(cands))
    used = 0
    # screening: every start runs SCREEN_ITER steps (on a sample of the sequences when
    # the data are large); the best two run on side by side until one trails by more
    # than RACE_GAP or both converge, and the better one is kept (an early lead can end
    # in a poorer optimum)
    if len(alive) > 2 and n_iter > SCREEN_ITER:
        screen = baum_welch(screen_lanes, *stacked, max_iter=SCREEN_ITER, tol=tol)
        screened = [float(v) for v in screen["loglik"]]
        used = SCREEN_ITER
        keep = sorted(range(len(alive)), key=lambda i: (-screened[i], i))[:2]
        alive = alive[keep]
        stacked = [screen[k][keep] for k in ("startprob", "transmat", "emissionprob")]
    res = baum_welch(lanes, *stacked, max_iter=n_iter - used, tol=tol, race=RACE_GAP)
    if not used:                             # one start, or too few steps to screen
        screened = [float(v) for v in res["loglik"]]
    pick = max(range(len(alive)), key=lambda i: (float(res["loglik"][i]), -alive[i]))
    best = int(alive[pick])
    res = {k: v[pick:pick + 1] for k, v in res.items()}
    n_iter = int(res["n_iter"][0]) + used
    pi = res["startprob"][0]
    A = res["transmat"][0]
    B = _hmm.apply_emission_floor(res["emissionprob"][0], emission_floor)
    ll = float(lanes.loglik(pi, A, B).sum())
    return {"startprob": pi, "transmat": A, "emissionprob": B, "loglik": ll,
            "n_iter": n_iter, "converged": bool(res["converged"][0]),
            "screen_logliks": screened, "best_restart": int(best), "start_kinds": kinds}


def _screen_lanes(X, lengths, n_symbols, lanes, seed_parts):
    """``lanes``, or those of a seeded random sample of whole sequences with about
    :data:`SCREEN_TOKENS` tokens when the data have more than 1.5 times that."""
    if len(X) <= 1.5 * SCREEN_TOKENS:
        return lanes
    rng = np.random.default_rng(_hmm.derive_seed(*seed_parts, 4099))
    order = rng.permutation(len(lengths))
    take = order[:int(np.searchsorted(np.cumsum(lengths[order]), SCREEN_TOKENS)) + 1]
    offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    Xs, Ls = _take(X, offsets, lengths, np.sort(take))
    return Lanes(Xs, Ls, n_symbols)


def _fit_counts(X, lengths, n_symbols, counts, seed_parts, opts):
    """Fit every state count in turn on one data set; each count also starts from
    every split of the previous count's fit (:func:`._em.split_start`). Counts from 2
    up that are not asked for (below the range, or gaps in it) are fitted as stepping
    stones and not returned."""
    lanes = Lanes(X, lengths, n_symbols)
    screen = _screen_lanes(X, lengths, n_symbols, lanes, seed_parts)
    fits = {}
    for n in range(min(2, min(counts)), max(counts) + 1):
        starts = []
        prev = fits.get(n - 1)
        if prev is not None:
            for s in range(n - 1):
                rng = np.random.default_rng(_hmm.derive_seed(*seed_parts, n, 977, s))
                starts.append(split_start(prev["startprob"], prev["transmat"],
                                          prev["emissionprob"], s, rng) + (f"split S{s + 1}",))
        fits[n] = _fit_best(X, lengths, n_symbols, n, seed_parts=seed_parts + (n,),
                            starts=starts, lanes=lanes, screen_lanes=screen, **opts)
    return {n: fits[n] for n in counts}


def _fit_counts_job(item, *, n_symbols, counts, opts):
    X, lengths, seed_parts = item
    return _fit_counts(X, lengths, n_symbols, counts, seed_parts, opts)


def _refine(X, lengths, n_symbols, fit, *, opts):
    """The model on all sequences, started from a training fit."""
    out = _fit_best(X, lengths, n_symbols, len(fit["startprob"]), seed_parts=(0,),
                    starts=[(fit["startprob"], fit["transmat"], fit["emissionprob"])],
                    **dict(opts, n_restarts=0))
    for key in ("screen_logliks", "best_restart", "start_kinds"):
        out[key] = fit[key]
    return out


def _best_model(fit, X, lengths, vocab, label, emission_floor, seed, n_restarts):
    pi, A, B = fit["startprob"], fit["transmat"], fit["emissionprob"]
    occ = _hmm.posterior_occupancy(pi, A, B, X, lengths)
    order = np.lexsort((np.arange(len(occ)), -np.round(occ, 12)))
    pi, A, B, occ = pi[order], A[np.ix_(order, order)], B[order], occ[order]
    info = {"seed": int(seed), "n_restarts": int(n_restarts),
            "best_restart": int(fit["best_restart"]),
            "start_kinds": list(fit["start_kinds"]),
            "restart_logliks": [float(v) for v in fit["screen_logliks"]],
            "n_iter": int(fit["n_iter"]), "converged": bool(fit["converged"]),
            "n_sequences": int(len(lengths)), "occupancy": occ}
    return PhaseModel(startprob=pi, transmat=A, emissionprob=B, vocab=list(vocab), label=label,
                      log_likelihood=float(fit["loglik"]), n_observations=int(len(X)),
                      emission_floor=float(emission_floor), info=info)


def _first_only(table, col):
    hits = np.flatnonzero(table[col].to_numpy())
    if len(hits) > 1:
        vals = np.zeros(len(table), dtype=bool)
        vals[hits[0]] = True
        table[col] = vals
