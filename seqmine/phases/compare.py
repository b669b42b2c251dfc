"""Comparing outcome groups through phase models: paths, aligned states, model distance."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment
from scipy.spatial.distance import jensenshannon
from scipy.stats import mannwhitneyu

from .._util.checks import check_fraction, check_int
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import ParameterError
from ..scoring.multitest import adjust_pvalues
from .model import PhaseModel  # noqa: F401  (used by the doctests)

__all__ = [
    "path_measures",
    "compare_state_paths",
    "align_states",
    "compare_transitions",
    "model_distance",
    "state_paths_db",
]

_MEASURE_COLUMNS = ["measure", "state", "to_state", "state_name", "to_state_name",
                    "group_a", "group_b", "n_a", "n_b", "mean_a", "mean_b", "median_a",
                    "median_b", "u_statistic", "cliffs_delta", "p_value", "q_value", "favours"]


def path_measures(states, lengths, n_states):
    """Per-sequence summaries of decoded state paths.

    Parameters
    ----------
    states : ndarray of int, shape (n_tokens,)
        Concatenated state paths.
    lengths : ndarray of int, shape (n_sequences,)
    n_states : int

    Returns
    -------
    occupancy : ndarray, shape (n_sequences, N)
        Share of the sequence's positions spent in each state.
    mean_dwell : ndarray, shape (n_sequences, N)
        Mean length (tokens) of the sequence's runs in each state; NaN if the
        state is never visited.
    transition_rate : ndarray, shape (n_sequences, N, N)
        Number of switches ``i -> j`` (``i != j``) divided by the number of steps
        ``length - 1`` (NaN for sequences shorter than 2; diagonal 0).

    Examples
    --------
    >>> occ, dwell, rate = path_measures(np.array([0, 0, 1, 1, 1, 0]), np.array([6]), 2)
    >>> occ.tolist(), dwell.tolist(), rate[0].tolist()
    ([[0.5, 0.5]], [[1.5, 3.0]], [[0.0, 0.2], [0.2, 0.0]])
    """
    states = np.asarray(states, dtype=np.int64)
    lengths = np.asarray(lengths, dtype=np.int64)
    n_seq, N = len(lengths), int(n_states)
    seq = np.repeat(np.arange(n_seq), lengths)
    with np.errstate(invalid="ignore", divide="ignore"):
        counts = np.bincount(seq * N + states, minlength=n_seq * N).reshape(n_seq, N)
        occ = counts / np.maximum(lengths, 1)[:, None]
        # runs: a run starts at a token whose state or sequence differs from the previous
        new_run = np.ones(len(states), dtype=bool)
        if len(states) > 1:
            new_run[1:] = (states[1:] != states[:-1]) | (seq[1:] != seq[:-1])
        runs = np.bincount(seq[new_run] * N + states[new_run],
                           minlength=n_seq * N).reshape(n_seq, N)
        dwell = np.where(runs > 0, counts / np.where(runs > 0, runs, 1), np.nan)
        same_seq = seq[1:] == seq[:-1] if len(states) > 1 else np.zeros(0, bool)
        switch = same_seq & (states[1:] != states[:-1]) if len(states) > 1 else same_seq
        key = (seq[:-1][switch] * N + states[:-1][switch]) * N + states[1:][switch]
        tcount = np.bincount(key, minlength=n_seq * N * N).reshape(n_seq, N, N)
        steps = (lengths - 1).astype(np.float64)
        rate = np.where(steps[:, None, None] > 0, tcount / np.maximum(steps, 1)[:, None, None],
                        np.nan)
    return occ, dwell, rate


def compare_state_paths(model, db, states=None, *, groups=None, alpha=0.05):
    """Compare groups on Viterbi-path occupancy, mean dwell and transition rates.

    Each sequence is decoded with ``model`` (usually the pooled model). For every
    pair of groups and every measure -- ``occupancy`` and ``mean_dwell`` per state,
    ``transition_rate`` per ordered pair of different states -- a two-sided
    Mann--Whitney U test compares the per-sequence values (sequences where the
    value is undefined, e.g. dwell in a state never visited, are left out).
    Benjamini--Hochberg q-values are computed over all rows of a pair of groups.

    Parameters
    ----------
    model : PhaseModel
    db : SequenceDB
    states : ndarray of int, optional
        Concatenated Viterbi paths (decoded here if omitted).
    groups : sequence of str, optional
        Groups to compare (all pairs); default all groups of ``db``.
    alpha : float
        Level for ``favours``.

    Returns
    -------
    pandas.DataFrame
        Columns ``measure``, ``state``, ``to_state`` (empty unless a transition),
        ``state_name``, ``to_state_name``, ``group_a``, ``group_b``, ``n_a``,
        ``n_b``, ``mean_a``, ``mean_b``, ``median_a``, ``median_b``,
        ``u_statistic`` (U of group a), ``cliffs_delta`` (``2U/(n_a n_b) - 1``,
        positive when a tends higher), ``p_value``, ``q_value``, ``favours``
        (group with the higher values when ``q_value < alpha``, else empty).
    """
    alpha = check_fraction(alpha, "alpha", "compare_state_paths")
    if states is None:
        _, states = model.decode(db)
    occ, dwell, rate = path_measures(states, db.lengths, model.n_states)
    pairs = _group_pairs(db, groups)
    labels, names = model.state_labels, model.state_names
    N = model.n_states
    measures = []
    for i in range(N):
        measures.append(("occupancy", i, None, occ[:, i]))
    for i in range(N):
        measures.append(("mean_dwell", i, None, dwell[:, i]))
    for i in range(N):
        for j in range(N):
            if i != j:
                measures.append(("transition_rate", i, j, rate[:, i, j]))
    rows = []
    for ga, gb in pairs:
        ia, ib = db.group_names.index(ga), db.group_names.index(gb)
        block = []
        for kind, i, j, values in measures:
            a = values[db.groups == ia]
            b = values[db.groups == ib]
            a, b = a[~np.isnan(a)], b[~np.isnan(b)]
            row = {"measure": kind, "state": labels[i], "to_state": "" if j is None else labels[j],
                   "state_name": names[i], "to_state_name": "" if j is None else names[j],
                   "group_a": ga, "group_b": gb, "n_a": len(a), "n_b": len(b),
                   "mean_a": _stat(np.mean, a), "mean_b": _stat(np.mean, b),
                   "median_a": _stat(np.median, a), "median_b": _stat(np.median, b),
                   "u_statistic": np.nan, "cliffs_delta": np.nan, "p_value": np.nan}
            if len(a) and len(b):
                if np.all(a == a[0]) and np.all(b == a[0]):
                    row.update(u_statistic=len(a) * len(b) / 2.0, cliffs_delta=0.0, p_value=1.0)
                else:
                    res = mannwhitneyu(a, b, alternative="two-sided")
                    u = float(res.statistic)
                    row.update(u_statistic=u, cliffs_delta=2.0 * u / (len(a) * len(b)) - 1.0,
                               p_value=float(res.pvalue))
            block.append(row)
        q = adjust_pvalues([r["p_value"] for r in block], "bh")
        for r, qq in zip(block, q):
            r["q_value"] = float(qq)
            fav = ""
            if qq < alpha:
                fav = ga if r["cliffs_delta"] > 0 else gb if r["cliffs_delta"] < 0 else ""
            r["favours"] = fav
        rows.extend(block)
    return pd.DataFrame(rows, columns=_MEASURE_COLUMNS)


def align_states(model_a, model_b):
    """Match the states of two models by their emission distributions.

    The cost of pairing state i of ``model_a`` with state j of ``model_b`` is the
    Jensen--Shannon distance (base 2, in [0, 1]) between their emission rows; the
    pairing with the least total cost is found by the Hungarian method
    (``scipy.optimize.linear_sum_assignment``).

    Returns
    -------
    pandas.DataFrame
        One row per matched pair, in ``model_a`` state order: ``state_a``,
        ``state_b``, ``name_a``, ``name_b``, ``js_distance``.

    Examples
    --------
    >>> a = PhaseModel.from_parameters([1, 0], [[.5, .5], [.5, .5]], [[.9, .1], [.1, .9]])
    >>> b = PhaseModel.from_parameters([1, 0], [[.5, .5], [.5, .5]], [[.2, .8], [.8, .2]])
    >>> align_states(a, b)[["state_a", "state_b"]].values.tolist()
    [['S1', 'S2'], ['S2', 'S1']]
    """
    _check_same_vocab(model_a, model_b)
    cost = np.array([[jensenshannon(pa, pb, base=2) for pb in model_b.emissionprob]
                     for pa in model_a.emissionprob])
    cost = np.nan_to_num(cost, nan=1.0)
    ra, cb = linear_sum_assignment(cost)
    return pd.DataFrame({
        "state_a": [model_a.state_labels[i] for i in ra],
        "state_b": [model_b.state_labels[j] for j in cb],
        "name_a": [model_a.state_names[i] for i in ra],
        "name_b": [model_b.state_names[j] for j in cb],
        "js_distance": cost[ra, cb],
    })


def compare_transitions(model_a, model_b, alignment=None):
    """Side-by-side transition probabilities of two models after state alignment.

    Returns
    -------
    pandas.DataFrame
        One row per ordered pair of aligned states of ``model_a``: ``from_a``,
        ``to_a``, ``from_b``, ``to_b`` (matched labels in ``model_b``), ``name_from``,
        ``name_to`` (names in ``model_a``), ``prob_a``, ``prob_b``, ``difference``
        (``prob_a - prob_b``).
    """
    if alignment is None:
        alignment = align_states(model_a, model_b)
    la, lb = model_a.state_labels, model_b.state_labels
    ia = [la.index(s) for s in alignment["state_a"]]
    ib = [lb.index(s) for s in alignment["state_b"]]
    rows = []
    for x in range(len(ia)):
        for y in range(len(ia)):
            pa = float(model_a.transmat[ia[x], ia[y]])
            pb = float(model_b.transmat[ib[x], ib[y]])
            rows.append({"from_a": la[ia[x]], "to_a": la[ia[y]],
                         "from_b": lb[ib[x]], "to_b": lb[ib[y]],
                         "name_from": model_a.state_names[ia[x]],
                         "name_to": model_a.state_names[ia[y]],
                         "prob_a": pa, "prob_b": pb, "difference": pa - pb})
    return pd.DataFrame(rows)


def model_distance(model_a, model_b, *, lengths=None, n_tokens=20000,
                   random_state=DEFAULT_CONFIG["seed"]):
    """Juang & Rabiner (1985) distance between two models, estimated by sampling.

    ``D(l1, l2) = (1/T) [log P(O2 | l2) - log P(O2 | l1)]`` with ``O2`` sampled from
    ``l2`` (a Kullback--Leibler rate, >= 0 up to sampling error); the symmetric
    distance is ``(D(a, b) + D(b, a)) / 2``.

    Parameters
    ----------
    model_a, model_b : PhaseModel
        Same vocabulary.
    lengths : array of int, optional
        Lengths of the sampled sequences are drawn from these (e.g. the observed
        sequence lengths); default one sequence of ``n_tokens``.
    n_tokens : int
        At least this many tokens are sampled from each model.
    random_state : int

    Returns
    -------
    dict
        ``d_ab`` (= D(a, b), data from b), ``d_ba``, ``symmetric``, ``n_tokens``.

    References
    ----------
    Juang, B.-H. & Rabiner, L. R. (1985). A probabilistic distance measure for
    hidden Markov models. AT&T Technical Journal 64(2), 391-408.
    """
    _check_same_vocab(model_a, model_b)
    n_tokens = check_int(n_tokens, "n_tokens", "model_distance", minimum=1)
    d = {}
    for key, src, other in (("d_ab", model_b, model_a), ("d_ba", model_a, model_b)):
        # the same stream for both directions makes the symmetric value exactly symmetric
        rng = np.random.default_rng(random_state)
        lens = _draw_lengths(lengths, n_tokens, rng)
        X, _ = src.sample(lens, rng)
        T = float(len(X))
        d[key] = (src.score(X, lens) - other.score(X, lens)) / T
    d["symmetric"] = 0.5 * (d["d_ab"] + d["d_ba"])
    d["n_tokens"] = int(n_tokens)
    return d


def state_paths_db(model, db, states):
    """Decoded state paths as a SequenceDB of state tokens ``"S1:<state name>"``.

    Times, source rows, learners, sessions and groups are those of ``db``, so the
    miner and contrast statistics run on phase sequences unchanged.
    """
    vocab = [f"{lab}:{name}" for lab, name in zip(model.state_labels, model.state_names)]
    states = np.asarray(states, dtype=np.int64)
    if len(states) != db.n_tokens:
        raise ParameterError(f"Got {len(states)} decoded states for {db.n_tokens} tokens.")
    encoding = dict(db.encoding)
    encoding["phase_model"] = model.label
    return SequenceDB(tokens=states.astype(np.int16), offsets=db.offsets.copy(), vocab=vocab,
                      is_pause=np.zeros(len(vocab), dtype=bool), times=db.times.copy(),
                      source_rows=db.source_rows.copy(), learners=db.learners.copy(),
                      sessions=db.sessions.copy(), groups=db.groups.copy(),
                      group_names=list(db.group_names), encoding=encoding)


# ----------------------------------------------------------------- helpers
def _stat(fn, x):
    return float(fn(x)) if len(x) else float("nan")


def _group_pairs(db, groups):
    names = list(db.group_names) if groups is None else [str(g) for g in groups]
    for g in names:
        if g not in db.group_names:
            raise ParameterError(
                f"Group {g!r} is not in the data (groups: {', '.join(db.group_names) or 'none'}).")
    return [(names[i], names[j]) for i in range(len(names)) for j in range(i + 1, len(names))]


def _check_same_vocab(a, b):
    if a.vocab != b.vocab:
        raise ParameterError("The two models have different vocabularies; fit them on the "
                             "same SequenceDB so their tokens are comparable.")


def _draw_lengths(lengths, n_tokens, rng):
    if lengths is None:
        return np.array([n_tokens], dtype=np.int64)
    lengths = np.asarray(lengths, dtype=np.int64)
    lengths = lengths[lengths > 0]
    if len(lengths) == 0:
        return np.array([n_tokens], dtype=np.int64)
    mean = lengths.mean()
    k = int(np.ceil(n_tokens / mean)) + 1
    out = rng.choice(lengths, size=k, replace=True)
    while out.sum() < n_tokens:
        out = np.concatenate([out, rng.choice(lengths, size=k, replace=True)])
    return out
