"""The phases stage: pooled and per-group phase models, comparisons and output files."""

from __future__ import annotations

import functools
import hashlib
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .._util.checks import check_choice, check_fraction, check_int, check_jobs, check_number
from .._util.csvio import write_csv
from .._util.jsonio import write_json
from .._util.parallel import parallel_map
from .._util.progress import progress
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import ParameterError
from . import _hmm
from .compare import (
    align_states,
    compare_state_paths,
    compare_transitions,
    model_distance,
    state_paths_db,
)
from .fitting import (
    DEFAULT_EMISSION_FLOOR,
    _fit_phase_model,
    _select_n_states,
    parse_state_range,
)
from .model import PhaseModel

__all__ = ["fit_phases", "PhaseResult", "load_phase_models"]

_DEFAULTS = DEFAULT_CONFIG["phases"]

_FORMAT = "seqmine-phases"
_VERSION = 1


@dataclass
class PhaseResult:
    """Everything the phases stage produces.

    Attributes
    ----------
    models : dict str -> PhaseModel
        ``"pooled"`` and one model per outcome group (keyed by group name).
    n_states : int
        The state count used for every model.
    selection : DataFrame
        BIC and held-out log-likelihood per state count (see :func:`select_n_states`).
    states : DataFrame
        :meth:`PhaseModel.describe_states` of every model.
    state_paths : DataFrame
        ``learner``, ``sequence`` (index in the input SequenceDB), ``position``,
        ``state`` (``S1``..), ``state_name``: the pooled model's Viterbi paths.
    state_db : SequenceDB
        The same paths as sequences of state tokens ``"S1:<name>"``.
    path_comparison : DataFrame
        :func:`compare_state_paths` of the pooled model's paths.
    alignment, aligned_transitions : DataFrame
        :func:`align_states` / :func:`compare_transitions` per pair of groups, with
        ``group_a`` and ``group_b`` columns first.
    distances : DataFrame
        Per pair of groups: ``group_a``, ``group_b``, ``d_ab``, ``d_ba``,
        ``symmetric`` (Juang--Rabiner distances between the two group models),
        ``n_tokens`` (sampled per direction), ``test_statistic``, ``n_permutations``,
        ``permutation_mean``, ``permutation_max``, ``p_value``. The permutation test
        uses one procedure for the observed and the permuted labellings: each side's
        model is refitted by one Baum--Welch run started at the pooled model, and
        ``test_statistic`` is the symmetric distance between the two refits;
        ``p_value = (1 + #{permuted >= observed}) / (1 + n_permutations)`` (NaN
        without permutations).
    excluded : DataFrame
        Sequences left out for being too short: ``sequence``, ``learner``, ``session``,
        ``length``.
    unseen_tokens : dict str -> list of str
        Per group, vocabulary tokens that never occur in the group's sequences
        (their emission probability is the floor).
    params : dict
        The effective parameters.
    """

    models: dict
    n_states: int
    selection: pd.DataFrame
    states: pd.DataFrame
    state_paths: pd.DataFrame
    state_db: SequenceDB
    path_comparison: pd.DataFrame
    alignment: pd.DataFrame
    aligned_transitions: pd.DataFrame
    distances: pd.DataFrame
    excluded: pd.DataFrame
    unseen_tokens: dict = field(default_factory=dict)
    params: dict = field(default_factory=dict)

    @property
    def at_top_of_range(self):
        """True when the chosen state count is the largest one tried (and more than one
        was tried): a wider range might fit better."""
        counts = self.selection["n_states"]
        return bool(len(counts) > 1 and self.n_states == counts.max())

    @property
    def n_excluded(self):
        """Number of sequences left out for being too short."""
        return len(self.excluded)

    def summary(self):
        """Plain-data summary (written as ``phases.json``)."""
        return {
            "format": _FORMAT, "version": _VERSION,
            "n_states": int(self.n_states),
            "criterion": self.params.get("criterion"),
            "n_states_at_top_of_range": self.at_top_of_range,
            "n_sequences_used": int(self.state_db.n_sequences),
            "n_tokens_used": int(self.state_db.n_tokens),
            "n_excluded": int(self.n_excluded),
            "excluded_reason": f"shorter than {self.params.get('min_length')} tokens",
            "models": {k: f"{_model_file(k)}.json" for k in self.models},
            "graphs": {k: f"{_graph_file(k)}.graphml" for k in self.models},
            "log_likelihood": {k: m.log_likelihood for k, m in self.models.items()},
            "unseen_tokens": self.unseen_tokens,
            "params": self.params,
        }

    def save(self, folder):
        """Write every table, model (JSON) and graph (GraphML) to ``folder``.

        Files: ``phases.json``, ``model_<name>.json``, ``graph_<name>.graphml``,
        ``states.csv``, ``state_paths.csv``, ``state_selection.csv``,
        ``occupancy_comparison.csv``, ``state_alignment.csv``,
        ``aligned_transitions.csv``, ``model_distance.csv``, ``excluded.csv`` and
        ``state_sequences/`` (the state-token SequenceDB).
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        threshold = self.params.get("edge_threshold", 0.05)
        for key, model in self.models.items():
            model.save(folder / f"{_model_file(key)}.json")
            model.write_graphml(folder / f"{_graph_file(key)}.graphml", threshold=threshold)
        tables = {
            "states.csv": self.states,
            "state_paths.csv": self.state_paths,
            "state_selection.csv": self.selection,
            "occupancy_comparison.csv": self.path_comparison,
            "state_alignment.csv": self.alignment,
            "aligned_transitions.csv": self.aligned_transitions,
            "model_distance.csv": self.distances,
            "excluded.csv": self.excluded,
        }
        for name, table in tables.items():
            write_csv(table, folder / name)
        self.state_db.save(folder / "state_sequences")
        write_json(folder / "phases.json", self.summary(), indent=1)
        return folder


def fit_phases(db, *, n_states=range(_DEFAULTS["min_states"], _DEFAULTS["max_states"] + 1),
               n_restarts=_DEFAULTS["n_restarts"], random_state=DEFAULT_CONFIG["seed"],
               n_jobs=DEFAULT_CONFIG["n_jobs"], criterion=_DEFAULTS["criterion"],
               n_splits=_DEFAULTS["n_splits"], min_length=2, groups=None,
               n_iter=_DEFAULTS["n_iter"], tol=1e-4, emission_floor=DEFAULT_EMISSION_FLOOR,
               n_permutations=_DEFAULTS["n_permutations"], distance_tokens=20000,
               edge_threshold=0.05, alpha=DEFAULT_CONFIG["contrast"]["alpha"]):
    """Fit phase models (HMMs) pooled and per outcome group, and compare the groups.

    1. Sequences shorter than ``min_length`` tokens are left out (listed in
       ``excluded``).
    2. The pooled model is fitted for every state count in ``n_states``; the count
       with the lowest BIC (``criterion="bic"``) or the highest held-out
       log-likelihood over ``n_splits`` learner folds (``"heldout"``) is used for
       every model. Both scores are reported in ``selection``.
    3. One model per group at that state count; every model shares the full
       vocabulary (tokens unseen in a group keep the emission floor).
    4. Comparisons: groups on the pooled model's Viterbi paths (Mann--Whitney, BH);
       aligned states and transition matrices of each pair of group models; the
       Juang--Rabiner distance with a permutation reference (group labels
       permuted among the pair's sequences, ``n_permutations`` times; both sides
       refitted from the pooled model, see ``PhaseResult.distances``); the paths
       as a SequenceDB of state tokens.

    Parameters
    ----------
    db : SequenceDB
    n_states : int, range, list of int or str like ``"2-6"``
    n_restarts : int
        Baum--Welch restarts per fit (seeded; best log-likelihood wins).
    random_state : int
    n_jobs : int
        Worker processes for restarts, state counts and permutations; results equal
        the serial run.
    criterion : {"bic", "heldout"}
    n_splits : int
        Learner folds for the held-out score (0 = off).
    min_length : int
        Shortest sequence used (at least 2).
    groups : list of str, optional
        Groups to model and compare; default every group with sequences.
    n_iter, tol : int, float
        EM limits (``tol`` per token).
    emission_floor : float
        Additive emission smoothing.
    n_permutations : int
        Permutations for the distance reference (0 = none).
    distance_tokens : int
        Tokens sampled per direction for the Juang--Rabiner distance.
    edge_threshold : float
        Smallest transition probability drawn as a graph edge.
    alpha : float
        Level for ``favours`` in the path comparison.

    Returns
    -------
    PhaseResult

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "a", "b", "c"]] * 6 + [["c", "c", "a", "b"]] * 6,
    ...                            groups=["strong"] * 6 + ["weak"] * 6)
    >>> res = fit_phases(db, n_states=2, n_restarts=1, n_splits=0, n_permutations=0)
    >>> sorted(res.models), res.n_states
    (['pooled', 'strong', 'weak'], 2)
    """
    where = "fit_phases"
    if not isinstance(db, SequenceDB):
        raise ParameterError(f"fit_phases needs a SequenceDB; got {type(db).__name__}.")
    counts = parse_state_range(n_states)
    n_restarts = check_int(n_restarts, "n_restarts", where, minimum=1)
    n_jobs = check_jobs(n_jobs, "n_jobs", where)
    seed = check_int(random_state, "random_state", where, minimum=0)
    criterion = check_choice(criterion, "criterion", ("bic", "heldout"), where)
    n_folds = check_int(n_splits, "n_splits", where, minimum=0)
    min_length = check_int(min_length, "min_length", where, minimum=2)
    n_permutations = check_int(n_permutations, "n_permutations", where, minimum=0)
    distance_tokens = check_int(distance_tokens, "distance_tokens", where, minimum=100)
    emission_floor = check_number(emission_floor, "emission_floor", where, minimum=0)
    edge_threshold = check_fraction(edge_threshold, "edge_threshold", where)
    if criterion == "heldout" and n_folds < 2:
        raise ParameterError("criterion='heldout' needs n_splits >= 2 (held-out scoring); "
                             "set n_splits or use criterion='bic'.")
    keep = db.lengths >= min_length
    excluded = pd.DataFrame({"sequence": np.flatnonzero(~keep),
                             "learner": db.learners[~keep], "session": db.sessions[~keep],
                             "length": db.lengths[~keep]})
    if not keep.any():
        raise ParameterError(
            f"No sequence has at least {min_length} tokens ({db.n_sequences} sequences, all "
            f"shorter); phase models need sequences of {min_length} or more tokens.")
    used_idx = np.flatnonzero(keep)
    data = db.subset(used_idx)
    group_list = _groups_to_model(data, groups)
    fit_kw = dict(n_iter=n_iter, tol=tol, emission_floor=emission_floor)

    bar = progress(total=3 + len(group_list), desc="phases")
    selection, by_count = _select_n_states(
        data, n_states=counts, n_restarts=n_restarts, n_splits=n_folds, random_state=seed,
        n_jobs=n_jobs, learners=data.learners, vocab=None, label="pooled", stream=0, **fit_kw)
    col = "best_bic" if criterion == "bic" else "best_heldout"
    chosen = int(selection.loc[selection[col], "n_states"].iloc[0])
    selection["selected"] = selection["n_states"] == chosen
    bar.update(1)
    models = {"pooled": by_count[chosen]}
    unseen = {}
    for g in group_list:
        gi = data.group_names.index(g)
        sub = data.subset(np.flatnonzero(data.groups == gi))
        present = np.bincount(sub.tokens.astype(np.int64), minlength=len(data.vocab)) > 0
        unseen[g] = [t for t, p in zip(data.vocab, present) if not p]
        models[g] = _fit_phase_model(sub, n_states=chosen, n_restarts=n_restarts,
                                     random_state=seed, n_jobs=n_jobs, vocab=None, label=g,
                                     stream=1 + gi, **fit_kw)
        bar.update(1)
    pooled = models["pooled"]
    _, states = pooled.decode(data)
    bar.update(1)
    labels = np.array(pooled.state_labels, dtype=object)
    names = np.array(pooled.state_names, dtype=object)
    seq_local = data.seq_index
    position = np.arange(data.n_tokens) - data.offsets[:-1][seq_local]
    state_paths = pd.DataFrame({"learner": data.learners[seq_local],
                                "sequence": used_idx[seq_local], "position": position,
                                "state": labels[states], "state_name": names[states]})
    state_db = state_paths_db(pooled, data, states)
    path_cmp = compare_state_paths(pooled, data, states, groups=group_list, alpha=alpha)
    align_rows, trans_rows, dist_rows = [], [], []
    pairs = [(group_list[i], group_list[j]) for i in range(len(group_list))
             for j in range(i + 1, len(group_list))]
    for pair_no, (ga, gb) in enumerate(pairs):
        al = align_states(models[ga], models[gb])
        tr = compare_transitions(models[ga], models[gb], al)
        al.insert(0, "group_b", gb)
        al.insert(0, "group_a", ga)
        tr.insert(0, "group_b", gb)
        tr.insert(0, "group_a", ga)
        align_rows.append(al)
        trans_rows.append(tr)
        dist_rows.append(pd.DataFrame([_distance_with_reference(
            data, models, ga, gb, pair_no, chosen, n_restarts, seed, n_jobs, n_permutations,
            distance_tokens, fit_kw)]))
    bar.update(1)
    bar.close()
    state_tables = pd.concat([m.describe_states() for m in models.values()], ignore_index=True)
    params = {"n_states": counts, "n_restarts": n_restarts, "random_state": seed,
              "criterion": criterion, "n_splits": n_folds, "min_length": min_length,
              "groups": group_list,
              "n_iter": n_iter, "tol": tol, "emission_floor": emission_floor,
              "n_permutations": n_permutations, "distance_tokens": distance_tokens,
              "edge_threshold": edge_threshold, "alpha": alpha}
    return PhaseResult(
        models=models, n_states=chosen, selection=selection, states=state_tables,
        state_paths=state_paths, state_db=state_db, path_comparison=path_cmp,
        alignment=_concat(align_rows, ["group_a", "group_b", "state_a", "state_b", "name_a",
                                       "name_b", "js_distance"]),
        aligned_transitions=_concat(trans_rows, ["group_a", "group_b", "from_a", "to_a",
                                                 "from_b", "to_b", "name_from", "name_to",
                                                 "prob_a", "prob_b", "difference"]),
        distances=_concat(dist_rows, _DIST_COLUMNS), excluded=excluded,
        unseen_tokens=unseen, params=params)


def load_phase_models(folder):
    """Read the models written by :meth:`PhaseResult.save` (dict name -> PhaseModel)."""
    folder = Path(folder)
    summary_path = folder / "phases.json"
    if not summary_path.is_file():
        raise ParameterError(f"{folder}: no phases.json; run 'seqmine phases' first.")
    summary = json.loads(summary_path.read_text(encoding="utf-8"))
    models = summary.get("models") if isinstance(summary, dict) else None
    if not isinstance(models, dict) or not all(
            isinstance(v, str) and re.fullmatch(r"[A-Za-z0-9_][A-Za-z0-9_.-]*", v)
            for v in models.values()):
        raise ParameterError(f"{summary_path}: 'models' must map names to model file names "
                             f"in this folder; run 'seqmine phases' again.")
    return {k: PhaseModel.load(folder / v) for k, v in models.items()}


# ----------------------------------------------------------------- helpers
_DIST_COLUMNS = ["group_a", "group_b", "d_ab", "d_ba", "symmetric", "n_tokens",
                 "test_statistic", "n_permutations", "permutation_mean", "permutation_max",
                 "p_value"]


def _groups_to_model(data, groups):
    sizes = data.group_sizes()
    if "pooled" in data.group_names:
        raise ParameterError("A group is named 'pooled', which is the name of the model of all "
                             "learners; rename the group (e.g. in the outcomes file).")
    if groups is None:
        return [g for g, n in zip(data.group_names, sizes) if n > 0]
    out = []
    for g in groups:
        g = str(g)
        if g not in data.group_names:
            raise ParameterError(
                f"Group {g!r} is not in the data (groups: {', '.join(data.group_names) or 'none'}).")
        if sizes[data.group_names.index(g)] == 0:
            raise ParameterError(f"Group {g!r} has no sequence of at least 2 tokens to model.")
        out.append(g)
    return out


def _distance_with_reference(data, models, ga, gb, pair_no, n_states, n_restarts, seed, n_jobs,
                             n_permutations, distance_tokens, fit_kw):
    ia, ib = data.group_names.index(ga), data.group_names.index(gb)
    members = np.flatnonzero((data.groups == ia) | (data.groups == ib))
    lengths = data.lengths[members]
    dseed = _hmm.derive_seed(seed, 4242, pair_no)
    d = model_distance(models[ga], models[gb], lengths=lengths, n_tokens=distance_tokens,
                       random_state=dseed)
    row = {"group_a": ga, "group_b": gb, **d, "test_statistic": np.nan,
           "n_permutations": n_permutations, "permutation_mean": np.nan,
           "permutation_max": np.nan, "p_value": np.nan}
    if n_permutations:
        pooled = models["pooled"]
        start = (pooled.startprob, pooled.transmat, pooled.emissionprob)
        is_a = data.groups[members] == ia
        labelings = [is_a]
        for p in range(n_permutations):
            rng = np.random.default_rng(_hmm.derive_seed(seed, 31337, pair_no, p))
            labelings.append(rng.permutation(is_a))
        stats = parallel_map(functools.partial(_warm_distance, data, members, start=start,
                                               dseed=dseed, distance_tokens=distance_tokens,
                                               fit_kw=fit_kw), labelings, n_jobs=n_jobs)
        observed, ref = stats[0], np.asarray(stats[1:])
        row.update(test_statistic=float(observed), permutation_mean=float(ref.mean()),
                   permutation_max=float(ref.max()),
                   p_value=float((1 + np.sum(ref >= observed)) / (1 + n_permutations)))
    return row


def _warm_distance(data, members, is_a, start, dseed, distance_tokens, fit_kw):
    """Symmetric distance between the two sides of a labelling, each side's model
    fitted by one Baum--Welch run started at the pooled model."""
    fitted = []
    for mask in (is_a, ~is_a):
        sub = data.subset(members[mask])
        X, lengths = sub.tokens.astype(np.int64), sub.lengths
        fit = _hmm.fit_restart(X, lengths, len(start[0]), len(data.vocab), 0, start=start,
                               **fit_kw)
        fitted.append(PhaseModel(fit["startprob"], fit["transmat"], fit["emissionprob"],
                                 list(data.vocab)))
    d = model_distance(fitted[0], fitted[1], lengths=data.lengths[members],
                       n_tokens=distance_tokens, random_state=dseed)
    return d["symmetric"]


def _concat(frames, columns):
    if not frames:
        return pd.DataFrame(columns=columns)
    return pd.concat(frames, ignore_index=True)[columns]


def _safe(name):
    """A file-name part for a group label: no separators; labels that had to be changed
    get a short hash so that two labels never share a file (``a/b`` vs ``a?b``)."""
    name = str(name)
    safe = re.sub(r"[^A-Za-z0-9_.-]", "_", name).lstrip(".") or "_"
    if safe != name:
        safe = f"{safe[:60]}-{hashlib.sha256(name.encode('utf-8')).hexdigest()[:8]}"
    return safe


def _model_file(key):
    return "model_pooled" if key == "pooled" else f"model_group-{_safe(key)}"


def _graph_file(key):
    return "graph_pooled" if key == "pooled" else f"graph_group-{_safe(key)}"
