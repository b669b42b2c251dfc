"""Featurizers that turn encoded sequences into numeric tables for classifiers.

All featurizers follow the scikit-learn transformer contract (keyword-only
parameters stored by ``__init__``, ``fit`` returns ``self``, learned state ends in
``_``) and drop into a :class:`sklearn.pipeline.Pipeline`.

**What X is.** ``X`` is a :class:`~seqmine.encoding.sequences.SequenceDB`; one sample is one
sequence (row ``i`` of the output describes ``X.sequence(i)``), and ``y`` holds the
group of each sequence (group names, or indices into ``X.group_names``). A
SequenceDB is used rather than a list of learner ids because it carries the tokens,
times and vocabulary the features need and because held-out data can be encoded
with the training encoder and passed straight in. Everything learned from the
training data (selected patterns, action vocabulary, group models) is stored by
*readable token names*, so a held-out database with a different vocabulary order is
featurised correctly; tokens never seen in training are ignored (patterns
containing them count zero).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin

from .._util.checks import check_choice, check_fraction, check_int, check_number
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import NotFittedError, ParameterError
from ..mining.miner import match, mine
from ..mining.patterns import PATTERN_SEPARATOR, pattern_tokens
from ..phases.classify import GroupHMMClassifier
from ..scoring.contrast import contrast

_MINE = DEFAULT_CONFIG["mine"]
_CONTRAST = DEFAULT_CONFIG["contrast"]
_SEED = DEFAULT_CONFIG["seed"]

__all__ = [
    "PatternFeaturizer",
    "FrequencyPauseFeaturizer",
    "HMMLikelihoodFeaturizer",
    "select_patterns",
    "group_codes",
]


class PatternFeaturizer(TransformerMixin, BaseEstimator):
    """Occurrences of group-contrasting patterns, discovered on the training data.

    ``fit`` runs the discovery steps on the training sequences only: mining
    (``miner``, default :func:`seqmine.mining.miner.mine`), differential scoring
    (``scorer``, default :func:`seqmine.scoring.contrast.contrast`) and selection
    (:func:`select_patterns`). ``transform`` counts the selected patterns in any
    database with ``matcher`` (default :func:`seqmine.mining.miner.match`), using the same
    gap/window constraints as mining. The mining, scoring and selection defaults are
    those of ``seqmine analyze`` (the ``[mine]``, ``[contrast]`` and ``[validate]``
    sections of :data:`seqmine.config.DEFAULT_CONFIG`).

    Parameters
    ----------
    min_support : float in (0, 1], default 0.2
        Mining threshold: a pattern is kept when at least this share of the
        sequences of at least one group contain it.
    min_length, max_length : int, default 2 and 4
        Pattern length limits for mining.
    max_gap : int or None, default 0
        Occurrence constraint (see :mod:`seqmine.mining.patterns`), used for mining and
        for counting. The default 0 looks for contiguous runs of tokens (pause
        tokens included), i.e. short ordered episodes; ``None`` allows any gap,
        which makes long patterns behave much like action frequencies.
    max_window : int or None, default None
        Span limit in tokens.
    skip_pauses : bool, default True
        Pause tokens do not count towards gaps and windows.
    start_with_action : bool, default True
    end_with_action, closed, maximal : bool, default False
        Further mining filters, passed to the miner only when switched on.
    max_patterns : int or None, default None
        Pattern-explosion guard of the miner (None = the miner's default,
        ``DEFAULT_CONFIG["mine"]["max_patterns"]``).
    support_unit : {"sequence", "learner"}, default "sequence"
        What ``min_support`` counts (see :func:`seqmine.mining.miner.mine`); passed to
        the miner only when it is not the default, so a pluggable miner without it works.
    correction : str, default "bh"
        Multiple-testing correction passed to the scorer.
    n_permutations : int, default 1000
        Permutations when ``correction="westfall-young"``.
    alpha : float in (0, 1], default 0.05
        Patterns with ``q_value <= alpha`` are selected.
    top_k : int, default 30
        At most this many patterns are kept (smallest p-values first).
    value : {"rate", "count"}, default "rate"
        ``"count"``: non-overlapping instance count of each pattern per sequence;
        ``"rate"``: that count per 100 tokens of the sequence (comparable between a
        full training sequence and the first part of a held-out one).
    random_state : int, default 20261202
        Passed to the scorer (permutation tests).
    miner, matcher, scorer : callable or None
        Pluggable discovery steps. ``miner(db, **constraints)`` returns a
        :class:`~seqmine.mining.patterns.PatternSet`; ``matcher(db, patterns,
        max_gap=, max_window=, skip_pauses=)`` returns a PatternSet whose
        ``counts`` hold instance counts; ``scorer(patternset, db)`` returns a
        DataFrame with columns ``pattern``, ``p_value``, ``q_value``.

    Attributes
    ----------
    patterns_ : list of tuple of str
        The selected patterns (token names), the only thing learned.
    scores_ : pandas.DataFrame
        The scorer's table for every mined pattern (training data only).
    n_mined_ : int
        Number of patterns mined on the training data.

    Notes
    -----
    When no pattern passes the selection, the output is a single all-zero column
    ``"no_pattern"`` so that a downstream classifier still fits (and predicts the
    training prior).

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "c"]] * 6 + [["c", "b", "a"]] * 6,
    ...                            groups=["x"] * 6 + ["y"] * 6)
    >>> f = PatternFeaturizer(min_length=2, top_k=2).fit(db)
    >>> f.patterns_
    [('a', 'b'), ('a', 'b', 'c')]
    >>> f.transform(db)[[0, 6]].round(1).tolist()
    [[33.3, 33.3], [0.0, 0.0]]
    """

    def __init__(self, *, min_support=_MINE["min_support"], min_length=_MINE["min_length"],
                 max_length=_MINE["max_length"], max_gap=_MINE["max_gap"],
                 max_window=_MINE["max_window"], skip_pauses=_MINE["skip_pauses"],
                 start_with_action=_MINE["start_with_action"],
                 end_with_action=_MINE["end_with_action"], closed=_MINE["closed"],
                 maximal=_MINE["maximal"], max_patterns=None,
                 support_unit=_MINE["support_unit"],
                 correction=_CONTRAST["correction"], alpha=_CONTRAST["alpha"],
                 n_permutations=_CONTRAST["n_permutations"],
                 top_k=DEFAULT_CONFIG["validate"]["top_k"], value="rate", random_state=_SEED,
                 miner=None, matcher=None, scorer=None):
        self.min_support = min_support
        self.min_length = min_length
        self.max_length = max_length
        self.max_gap = max_gap
        self.max_window = max_window
        self.skip_pauses = skip_pauses
        self.start_with_action = start_with_action
        self.end_with_action = end_with_action
        self.closed = closed
        self.maximal = maximal
        self.max_patterns = max_patterns
        self.support_unit = support_unit
        self.correction = correction
        self.alpha = alpha
        self.n_permutations = n_permutations
        self.top_k = top_k
        self.value = value
        self.random_state = random_state
        self.miner = miner
        self.matcher = matcher
        self.scorer = scorer

    def fit(self, X, y=None):
        """Mine, score and select patterns on the training sequences ``X``."""
        where = "PatternFeaturizer"
        check_fraction(self.min_support, "min_support", where)
        check_fraction(self.alpha, "alpha", where)
        check_int(self.top_k, "top_k", where, minimum=1)
        check_choice(self.value, "value", ("rate", "count"), where)
        db = _as_db(X, where)
        codes, names = group_codes(db, y)
        db = db.with_groups(codes, names)
        miner = self.miner or mine
        scorer = self.scorer or _ContrastScorer(self.correction, self.alpha,
                                                self.random_state, self.n_permutations)
        options = {k: True for k in ("start_with_action", "end_with_action", "closed",
                                     "maximal") if getattr(self, k)}
        if self.max_patterns is not None:
            options["max_patterns"] = self.max_patterns
        if self.support_unit != _MINE["support_unit"]:  # a pluggable miner may lack it
            options["support_unit"] = self.support_unit
        mined = miner(db, min_support=self.min_support, min_length=self.min_length,
                      max_length=self.max_length, max_gap=self.max_gap,
                      max_window=self.max_window, skip_pauses=self.skip_pauses, **options)
        self.n_mined_ = int(mined.n_patterns)
        if mined.n_patterns:
            scores = pd.DataFrame(scorer(mined, db))
        else:
            scores = pd.DataFrame({"pattern": [], "p_value": [], "q_value": []})
        self.scores_ = scores
        chosen = select_patterns(scores, alpha=self.alpha, top_k=self.top_k, as_tokens=True)
        self.patterns_ = [tuple(p) for p in chosen]
        return self

    def transform(self, X):
        """Occurrence features of the selected patterns, shape (n_sequences, n_patterns)."""
        _check_fitted(self, "patterns_")
        db = _as_db(X, "PatternFeaturizer")
        if not self.patterns_:
            return np.zeros((db.n_sequences, 1))
        index = {v: i for i, v in enumerate(db.vocab)}
        present = [i for i, p in enumerate(self.patterns_) if all(t in index for t in p)]
        out = np.zeros((db.n_sequences, len(self.patterns_)))
        if present and db.n_sequences:
            ids = [tuple(index[t] for t in self.patterns_[i]) for i in present]
            matcher = self.matcher or match
            matched = matcher(db, ids, max_gap=self.max_gap, max_window=self.max_window,
                              skip_pauses=self.skip_pauses)
            out[:, present] = np.asarray(matched.counts.todense(), dtype=float)
        if self.value == "rate":
            out = 100.0 * out / np.maximum(db.lengths, 1)[:, None]
        return out

    def get_feature_names_out(self, input_features=None):
        """``"pattern: a > b"`` for each selected pattern (or ``"no_pattern"``)."""
        _check_fitted(self, "patterns_")
        if not self.patterns_:
            return np.array(["no_pattern"], dtype=object)
        return np.array(["pattern: " + PATTERN_SEPARATOR.join(p) for p in self.patterns_],
                        dtype=object)


class FrequencyPauseFeaturizer(TransformerMixin, BaseEstimator):
    """Summary features: relative action frequencies and the pause distribution.

    For each sequence: the share of each training action among its action events
    (pause tokens excluded; actions unseen in training go to ``action:<other>``),
    then the mean and standard deviation of ``log(1 + gap)``, where ``gap`` is the
    time in seconds between consecutive action events. The usual summary-feature
    approach, used as a baseline for the order-aware features.

    Parameters
    ----------
    log_offset : float > 0, default 1.0
        Seconds added before taking the logarithm (gaps of 0 s are common).

    Attributes
    ----------
    actions_ : list of str
        Action names seen in training (vocabulary order).
    pause_fill_ : ndarray of shape (2,)
        Training means of the pause mean and sd, used for sequences with fewer
        than two events (no gap) and one event (sd undefined).

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "b", "a"], ["b", "b"]])
    >>> f = FrequencyPauseFeaturizer().fit(db)
    >>> f.get_feature_names_out().tolist()
    ['action:a', 'action:b', 'action:<other>', 'pause_log_mean', 'pause_log_sd']
    >>> f.transform(db)[:, :2].round(3).tolist()
    [[0.667, 0.333], [0.0, 1.0]]
    """

    def __init__(self, *, log_offset=1.0):
        self.log_offset = log_offset

    def fit(self, X, y=None):
        """Learn the action vocabulary and the fill values for undefined pauses."""
        check_number(self.log_offset, "log_offset", "FrequencyPauseFeaturizer", minimum=0,
                     strict=True)
        db = _as_db(X, "FrequencyPauseFeaturizer")
        seen = np.zeros(len(db.vocab), dtype=bool)
        seen[db.tokens[db.action_mask]] = True
        self.actions_ = [v for i, v in enumerate(db.vocab) if seen[i]]
        self.pause_fill_ = np.zeros(2)
        stats = self._pause_stats(db)
        for j in range(2):
            col = stats[:, j]
            col = col[np.isfinite(col)]
            self.pause_fill_[j] = float(col.mean()) if len(col) else 0.0
        return self

    def transform(self, X):
        """Feature table, shape (n_sequences, n_actions + 3)."""
        _check_fitted(self, "actions_")
        db = _as_db(X, "FrequencyPauseFeaturizer")
        col_of = np.full(len(db.vocab), len(self.actions_), dtype=np.int64)
        pos = {a: i for i, a in enumerate(self.actions_)}
        for i, v in enumerate(db.vocab):
            if v in pos:
                col_of[i] = pos[v]
        act = db.action_mask
        seq = db.seq_index[act]
        cols = col_of[db.tokens[act]]
        n_cols = len(self.actions_) + 1
        freq = np.zeros((db.n_sequences, n_cols))
        np.add.at(freq, (seq, cols), 1.0)
        totals = freq.sum(axis=1, keepdims=True)
        freq = np.divide(freq, totals, out=np.zeros_like(freq), where=totals > 0)
        stats = self._pause_stats(db)
        stats = np.where(np.isfinite(stats), stats, self.pause_fill_[None, :])
        return np.hstack([freq, stats])

    def get_feature_names_out(self, input_features=None):
        """``action:<name>`` per action, ``action:<other>``, then the two pause columns."""
        _check_fitted(self, "actions_")
        names = [f"action:{a}" for a in self.actions_] + ["action:<other>",
                                                           "pause_log_mean", "pause_log_sd"]
        return np.array(names, dtype=object)

    def _pause_stats(self, db):
        """(n_sequences, 2): mean and sd (ddof=0) of log(offset + gap); NaN if undefined."""
        act = db.action_mask
        seq = db.seq_index[act]
        t = db.times[act]
        same = seq[1:] == seq[:-1]
        gaps = np.log(self.log_offset + np.maximum(np.diff(t), 0.0))[same]
        gseq = seq[1:][same]
        n = np.bincount(gseq, minlength=db.n_sequences).astype(float)
        s1 = np.bincount(gseq, weights=gaps, minlength=db.n_sequences)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = s1 / n
            dev = gaps - mean[gseq]
            var = np.bincount(gseq, weights=dev * dev, minlength=db.n_sequences) / n
            sd = np.sqrt(var)
        sd = np.where(n >= 2, sd, np.nan)
        return np.column_stack([mean, sd])


class HMMLikelihoodFeaturizer(TransformerMixin, BaseEstimator):
    """Log-likelihood ratio of each sequence under group-specific hidden Markov models.

    ``fit`` trains one categorical HMM per group on that group's training
    sequences with :class:`seqmine.phases.GroupHMMClassifier` (Baum–Welch,
    ``n_restarts`` random starts, best log-likelihood kept); this class is a thin
    adapter that turns its log-likelihoods into features. ``transform`` returns, for each group ``g`` other than the first,
    ``(log L_g(s) - log L_0(s)) / len(s)``: the log-likelihood ratio per token,
    which stays on one scale whether the whole sequence or only its beginning is
    seen. Empty sequences get 0. Tokens not in the training vocabulary are left
    out of the held-out sequence before scoring.

    Parameters
    ----------
    n_states : int, default 3
    n_restarts : int, default 2
    n_iter : int, default 50
        Most EM steps per group model (screening of the starts included).
    smoothing : float > 0, default 1e-3
        Emission probability floor (added, then renormalised), so a token rare in
        one group does not give an infinite ratio.
    random_state : int, default 20261202

    Attributes
    ----------
    vocab_ : list of str
        Training vocabulary (symbol ``i`` of the models).
    models_ : GroupHMMClassifier
        The fitted group models (``models_.models_[g]`` is the
        :class:`~seqmine.phases.PhaseModel` of group ``g``).
    group_names_ : list of str

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "a", "b"]] * 6 + [["b", "b", "a"]] * 6,
    ...                            groups=["x"] * 6 + ["y"] * 6)
    >>> f = HMMLikelihoodFeaturizer(n_states=2, n_restarts=1).fit(db)
    >>> X = f.transform(db)
    >>> X.shape, bool(X[6:].mean() > X[:6].mean())
    ((12, 1), True)
    """

    def __init__(self, *, n_states=3, n_restarts=2, n_iter=50, smoothing=1e-3,
                 random_state=_SEED):
        self.n_states = n_states
        self.n_restarts = n_restarts
        self.n_iter = n_iter
        self.smoothing = smoothing
        self.random_state = random_state

    def fit(self, X, y=None):
        """Fit one HMM per group on the training sequences."""
        where = "HMMLikelihoodFeaturizer"
        check_int(self.n_states, "n_states", where, minimum=1)
        check_int(self.n_restarts, "n_restarts", where, minimum=1)
        check_int(self.n_iter, "n_iter", where, minimum=1)
        check_number(self.smoothing, "smoothing", where, minimum=0, strict=True)
        db = _as_db(X, where)
        codes, names = group_codes(db, y)
        self.vocab_ = list(db.vocab)
        self.group_names_ = list(names)
        for g in range(len(names)):
            if not np.any(db.lengths[codes == g] > 0):
                raise ParameterError(
                    f"HMMLikelihoodFeaturizer: group {names[g]!r} has no non-empty training "
                    f"sequence; every group needs data to fit its model.")
        # class names "000000", "000001", ... keep the group order (classes_ are sorted)
        labels = np.array([f"{c:06d}" for c in codes], dtype=object)
        self.models_ = GroupHMMClassifier(n_states=self.n_states, n_restarts=self.n_restarts,
                                          random_state=self.random_state, n_iter=self.n_iter,
                                          emission_floor=self.smoothing).fit(db, labels)
        return self

    def log_likelihoods(self, X):
        """``log P(s | model_g)`` per sequence and group, shape (n_sequences, n_groups),
        and the number of scored tokens per sequence."""
        _check_fitted(self, "models_")
        db = _as_db(X, "HMMLikelihoodFeaturizer")
        index = {v: i for i, v in enumerate(self.vocab_)}
        remap = np.array([index.get(v, -1) for v in db.vocab], dtype=np.int64)
        sym = remap[db.tokens] if db.n_tokens else np.zeros(0, np.int64)
        known = sym >= 0
        lengths = np.bincount(db.seq_index[known], minlength=db.n_sequences)
        sym = sym[known]
        offsets = np.concatenate([[0], np.cumsum(lengths)])
        seqs = [sym[offsets[i]: offsets[i + 1]] for i in range(db.n_sequences)]
        ll = np.asarray(self.models_.log_likelihoods(seqs), dtype=float)
        return ll, lengths

    def transform(self, X):
        """Per-token log-likelihood ratios, shape (n_sequences, n_groups - 1)."""
        ll, lengths = self.log_likelihoods(X)
        per_token = ll / np.maximum(lengths, 1)[:, None]
        return per_token[:, 1:] - per_token[:, [0]]

    def get_feature_names_out(self, input_features=None):
        """``hmm_llr_<group>_vs_<first group>`` for each group after the first."""
        _check_fitted(self, "models_")
        g0 = self.group_names_[0]
        return np.array([f"hmm_llr_{g}_vs_{g0}" for g in self.group_names_[1:]], dtype=object)


# --------------------------------------------------------------------- helpers
def select_patterns(scores, *, alpha=_CONTRAST["alpha"],
                    top_k=DEFAULT_CONFIG["validate"]["top_k"], as_tokens=False):
    """Choose patterns from a contrast table: significant first, smallest p-values.

    Parameters
    ----------
    scores : pandas.DataFrame
        Columns ``pattern`` (readable name), ``p_value`` and ``q_value``.
    alpha : float
        Keep rows with ``q_value <= alpha``.
    top_k : int
        Keep at most this many (ordered by p-value, then pattern name, so ties
        are broken deterministically).
    as_tokens : bool
        Return each pattern as its token list (from the ``tokens`` column when the
        table has one, which is exact even for tokens containing ``" > "``).

    Returns
    -------
    list of str (or of list of str)

    Examples
    --------
    >>> t = pd.DataFrame({"pattern": ["a > b", "b", "a"], "p_value": [0.001, 0.2, 0.001],
    ...                   "q_value": [0.003, 0.2, 0.003]})
    >>> select_patterns(t, alpha=0.05, top_k=5)
    ['a', 'a > b']
    """
    if len(scores) == 0:
        return []
    rows = scores.reset_index(drop=True)
    t = pd.DataFrame({"pattern": rows["pattern"].astype(str),
                      "p_value": pd.to_numeric(rows["p_value"]),
                      "q_value": pd.to_numeric(rows["q_value"]),
                      "tokens": (rows["tokens"].astype(str) if "tokens" in rows.columns
                                 else rows["pattern"].astype(str))})
    t = t[t["q_value"] <= alpha]
    t = t.sort_values(["p_value", "pattern", "tokens"], kind="mergesort").head(int(top_k))
    if not as_tokens:
        return t["pattern"].tolist()
    return [pattern_tokens(r) for r in rows.loc[t.index].to_dict("records")]


def group_codes(db, y):
    """Group index per sequence and the group names, from ``y`` or from ``db.groups``.

    ``y`` may hold group names or integer indices into ``db.group_names``. Names
    keep the order of ``db.group_names`` when they all appear there, else sorted.

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a"], ["b"], ["a"]])
    >>> codes, names = group_codes(db, ["weak", "strong", "weak"])
    >>> codes.tolist(), names
    ([1, 0, 1], ['strong', 'weak'])
    """
    if y is None:
        codes, names = np.asarray(db.groups, dtype=np.int64), list(db.group_names)
    else:
        y = np.asarray(y)
        if len(y) != db.n_sequences:
            raise ParameterError(
                f"y has {len(y)} labels but X has {db.n_sequences} sequences; give one group "
                f"label per sequence.")
        if y.dtype.kind in "iu":
            codes, names = y.astype(np.int64), list(db.group_names)
            if len(names) == 0:
                names = [str(v) for v in range(int(codes.max()) + 1)]
        else:
            labels = [str(v) for v in y]
            distinct = set(labels)
            if distinct <= set(db.group_names):
                names = list(db.group_names)
            else:
                names = sorted(distinct)
            pos = {n: i for i, n in enumerate(names)}
            codes = np.array([pos[v] for v in labels], dtype=np.int64)
    if np.any(codes < 0):
        raise ParameterError(
            "Every training sequence needs a group; drop sequences whose learner has no "
            "group (group -1) before fitting.")
    present = np.unique(codes)
    if len(present) < 2:
        only = names[int(present[0])] if len(present) else "none"
        raise ParameterError(
            f"The training data hold one group only ({only!r}); at least two groups are "
            f"needed to learn what separates them.")
    return codes, names


def _as_db(X, where):
    if not isinstance(X, SequenceDB):
        raise ParameterError(
            f"{where} expects X to be a SequenceDB (one sample per sequence). "
            f"Got {type(X).__name__} instead.")
    return X


def _check_fitted(est, attr):
    if not hasattr(est, attr):
        raise NotFittedError(
            f"This {type(est).__name__} is not fitted yet; call 'fit' with training data first.")


class _ContrastScorer:
    """Calls :func:`seqmine.scoring.contrast.contrast` with fixed options (picklable)."""

    def __init__(self, correction, alpha, random_state, n_permutations):
        self.correction = correction
        self.alpha = alpha
        self.random_state = random_state
        self.n_permutations = n_permutations

    def __call__(self, patterns, db):
        # unit="learner" (the default): several sequences (sessions) of one learner are
        # merged, so each learner counts once
        return contrast(patterns, db, correction=self.correction, alpha=self.alpha,
                        random_state=self.random_state, n_permutations=self.n_permutations,
                        n_bootstrap=0, n_replication_splits=0, redundancy=None)
