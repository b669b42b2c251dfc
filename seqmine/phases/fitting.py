"""Fitting phase models: Baum--Welch restarts and choice of the number of states."""

from __future__ import annotations

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
from .model import PhaseModel

__all__ = ["fit_phase_model", "select_n_states", "parse_state_range"]

#: Default additive emission smoothing (see :func:`_hmm.apply_emission_floor`).
DEFAULT_EMISSION_FLOOR = 1e-4
_DEFAULTS = DEFAULT_CONFIG["phases"]


def fit_phase_model(sequences, *, n_states=3, n_restarts=_DEFAULTS["n_restarts"],
                    random_state=DEFAULT_CONFIG["seed"], n_jobs=DEFAULT_CONFIG["n_jobs"],
                    n_iter=_DEFAULTS["n_iter"], tol=1e-4,
                    emission_floor=DEFAULT_EMISSION_FLOOR, vocab=None, label="model"):
    """Fit one categorical HMM by Baum--Welch with several random restarts.

    Each restart starts from a random point drawn from a seed derived from
    ``(random_state, stream, n_states, restart)`` (stream 0 here; the pooled and
    group models of :func:`~seqmine.phases.fit_phases` use their own streams); the
    restart with the highest
    log-likelihood wins (ties: the lowest restart number). Restarts run in
    parallel with ``n_jobs`` and give the same result as a serial run. States of
    the winner are put in a canonical order: decreasing expected occupancy.

    Parameters
    ----------
    sequences : SequenceDB or list of int arrays
        Token ids; with a list, ``vocab`` (or the largest id) fixes the vocabulary.
    n_states : int
    n_restarts : int
    random_state : int
    n_jobs : int
        Worker processes (``-1`` = all cores; see :func:`seqmine._util.parallel.parallel_map`).
    n_iter : int
        Maximum EM iterations per restart.
    tol : float
        EM stops when the log-likelihood gains less than ``tol`` per token.
    emission_floor : float
        Additive smoothing of emission rows, ``(b + floor) / (1 + M floor)``, so a
        token unseen in the training data keeps a small probability.
    vocab : list of str, optional
    label : str

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
                            emission_floor=emission_floor, vocab=vocab, label=label, stream=0)


def _fit_phase_model(sequences, *, n_states, n_restarts, random_state, n_jobs, n_iter, tol,
                     emission_floor, vocab, label, stream):
    """:func:`fit_phase_model` drawing its restarts from random stream ``stream``."""
    seed = random_state
    X, lengths, vocab = _arrays(sequences, vocab)
    n_states = check_int(n_states, "n_states", "fit_phase_model", minimum=1)
    n_restarts = check_int(n_restarts, "n_restarts", "fit_phase_model", minimum=1)
    n_jobs = check_jobs(n_jobs, "n_jobs", "fit_phase_model")
    emission_floor = check_number(emission_floor, "emission_floor", "fit_phase_model",
                                  minimum=0)
    _check_supported(n_states, len(vocab), len(X), label)
    tasks = [(n_states, r) for r in range(n_restarts)]
    fits = _run(X, lengths, len(vocab), tasks, seed, stream, 0, n_jobs,
                n_iter=n_iter, tol=tol, emission_floor=emission_floor)
    return _best_model(fits, X, lengths, vocab, label, emission_floor, seed, n_restarts)


def select_n_states(sequences, *,
                    n_states=range(_DEFAULTS["min_states"], _DEFAULTS["max_states"] + 1),
                    n_restarts=_DEFAULTS["n_restarts"], n_splits=_DEFAULTS["n_splits"],
                    random_state=DEFAULT_CONFIG["seed"], n_jobs=DEFAULT_CONFIG["n_jobs"],
                    n_iter=_DEFAULTS["n_iter"], tol=1e-4, emission_floor=DEFAULT_EMISSION_FLOOR,
                    learners=None, vocab=None, label="pooled"):
    """Fit every state count in a range; score it by BIC and held-out log-likelihood.

    Held-out log-likelihood: learners are split into ``n_splits`` folds (sequences of
    one learner stay together); for each fold a model is fitted (with restarts) on
    the other folds and scores the fold's sequences. State counts whose free
    parameters reach the number of tokens are dropped with a :class:`SeqmineWarning`.

    Returns
    -------
    table : pandas.DataFrame
        One row per state count: ``model``, ``n_states``, ``n_parameters``,
        ``n_observations``, ``log_likelihood``, ``bic``, ``heldout_loglik`` (summed
        over folds), ``heldout_loglik_per_token``, ``best_bic``, ``best_heldout``
        (bool: the count chosen by each criterion).
    models : dict int -> PhaseModel
        The model fitted on all sequences for each state count.
    """
    return _select_n_states(sequences, n_states=n_states, n_restarts=n_restarts,
                            n_splits=n_splits, random_state=random_state, n_jobs=n_jobs,
                            n_iter=n_iter, tol=tol, emission_floor=emission_floor,
                            learners=learners, vocab=vocab, label=label, stream=0)


def _select_n_states(sequences, *, n_states, n_restarts, n_splits, random_state, n_jobs, n_iter,
                     tol, emission_floor, learners, vocab, label, stream):
    """:func:`select_n_states` drawing its restarts from random stream ``stream``."""
    seed, n_folds = random_state, n_splits
    X, lengths, vocab = _arrays(sequences, vocab)
    counts = parse_state_range(n_states)
    n_restarts = check_int(n_restarts, "n_restarts", "select_n_states", minimum=1)
    n_jobs = check_jobs(n_jobs, "n_jobs", "select_n_states")
    n_folds = check_int(n_folds, "n_splits", "select_n_states", minimum=0)
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
    tasks = [(n, r) for n in counts for r in range(n_restarts)]
    fold_of = None
    if n_folds:
        fold_of = _learner_folds(learners if learners is not None else
                                 np.arange(len(lengths)).astype(str), n_folds, seed)
        tasks_cv = [(n, r, f) for f in range(n_folds) for n in counts for r in range(n_restarts)]
    # all fits in one parallel batch
    offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    jobs = [(X, lengths, n, r, 0) for n, r in tasks]
    if n_folds:
        train_sets = []
        for f in range(n_folds):
            idx = np.flatnonzero(fold_of != f)
            train_sets.append(_take(X, offsets, lengths, idx))
        jobs += [(train_sets[f][0], train_sets[f][1], n, r, f + 1) for n, r, f in tasks_cv]
    fits = _parallel(jobs, M, seed, stream, n_jobs, n_iter=n_iter, tol=tol,
                     emission_floor=emission_floor)
    full = fits[:len(tasks)]
    cv = fits[len(tasks):]
    rows, models = [], {}
    for n in counts:
        sel = [fit for (nn, _), fit in zip(tasks, full) if nn == n]
        model = _best_model(sel, X, lengths, vocab, label, emission_floor, seed, n_restarts)
        models[n] = model
        k = model.n_free_parameters
        row = {"model": label, "n_states": n, "n_parameters": k, "n_observations": len(X),
               "log_likelihood": model.log_likelihood,
               "bic": -2.0 * model.log_likelihood + k * math.log(len(X)),
               "heldout_loglik": float("nan"), "heldout_loglik_per_token": float("nan")}
        if n_folds:
            total, n_tok = 0.0, 0
            for f in range(n_folds):
                sel = [fit for (nn, _, ff), fit in zip(tasks_cv, cv) if nn == n and ff == f]
                best = max(range(len(sel)), key=lambda i: (sel[i]["loglik"], -i))
                b = sel[best]
                idx = np.flatnonzero(fold_of == f)
                Xh, lh = _take(X, offsets, lengths, idx)
                total += float(_hmm.forward_loglik(b["startprob"], b["transmat"],
                                                   b["emissionprob"], Xh, lh).sum())
                n_tok += len(Xh)
            row["heldout_loglik"] = total
            row["heldout_loglik_per_token"] = total / max(n_tok, 1)
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
    lens = lengths[idx]
    parts = [X[offsets[i]:offsets[i + 1]] for i in idx]
    Xs = np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)
    return Xs, lens


def _fit_job(call):
    X, lengths, n_symbols, n_states, seed, kwargs = call
    return _hmm.fit_restart(X, lengths, n_states, n_symbols, seed, **kwargs)


def _parallel(jobs, n_symbols, seed, purpose, n_jobs, **kwargs):
    """Run ``(X, lengths, n_states, restart, fold)`` fits; order of results = order of jobs."""
    calls = [(X, lengths, n_symbols, n, _hmm.derive_seed(seed, purpose, n, fold, r), kwargs)
             for X, lengths, n, r, fold in jobs]
    return parallel_map(_fit_job, calls, n_jobs=n_jobs)


def _run(X, lengths, n_symbols, tasks, seed, purpose, fold, n_jobs, **kwargs):
    jobs = [(X, lengths, n, r, fold) for n, r in tasks]
    return _parallel(jobs, n_symbols, seed, purpose, n_jobs, **kwargs)


def _best_model(fits, X, lengths, vocab, label, emission_floor, seed, n_restarts):
    lls = [f["loglik"] for f in fits]
    best = max(range(len(fits)), key=lambda i: (fits[i]["loglik"], -i))
    b = fits[best]
    pi, A, B = b["startprob"], b["transmat"], b["emissionprob"]
    occ = _hmm.posterior_occupancy(pi, A, B, X, lengths)
    order = np.lexsort((np.arange(len(occ)), -np.round(occ, 12)))
    pi, A, B, occ = pi[order], A[np.ix_(order, order)], B[order], occ[order]
    info = {"seed": int(seed), "n_restarts": int(n_restarts), "best_restart": int(best),
            "restart_logliks": [float(v) for v in lls], "n_iter": int(b["n_iter"]),
            "converged": bool(b["converged"]), "n_sequences": int(len(lengths)),
            "occupancy": occ}
    return PhaseModel(startprob=pi, transmat=A, emissionprob=B, vocab=list(vocab), label=label,
                      log_likelihood=float(b["loglik"]), n_observations=int(len(X)),
                      emission_floor=float(emission_floor), info=info)


def _first_only(table, col):
    hits = np.flatnonzero(table[col].to_numpy())
    if len(hits) > 1:
        vals = np.zeros(len(table), dtype=bool)
        vals[hits[0]] = True
        table[col] = vals
