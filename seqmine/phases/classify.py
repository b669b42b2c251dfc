"""Log-likelihood-ratio classification of (partial) sequences between group phase models."""

from __future__ import annotations

import numpy as np
from scipy.special import logsumexp
from sklearn.base import BaseEstimator, ClassifierMixin

from .._util.checks import check_choice, check_int, check_number
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import NotFittedError, ParameterError
from . import _hmm
from .fitting import (
    DEFAULT_EMISSION_FLOOR,
    _fit_phase_model,
    _select_n_states,
    parse_state_range,
)

__all__ = ["GroupHMMClassifier"]


class GroupHMMClassifier(ClassifierMixin, BaseEstimator):
    """Classify sequences by comparing their likelihood under one HMM per group.

    One phase model is fitted per class; a sequence ``O`` (complete or only its
    first part, e.g. ``db.cut(0.3)``) gets the posterior
    ``P(c | O) ∝ P(c) P(O | model_c)``. For two classes the decision function is the
    log-likelihood ratio ``log P(O | model_1) - log P(O | model_0) +
    log P(1)/P(0)``; positive favours ``classes_[1]`` (scikit-learn convention).

    Parameters
    ----------
    n_states : int, or several counts (range, list, ``"2-5"``)
        Hidden states of every group model. With several counts, each group's
        count is chosen by BIC on its own training sequences.
    n_restarts : int
        Baum--Welch restarts per model.
    random_state : int
    n_iter : int
    tol : float
        Per-token EM convergence threshold.
    emission_floor : float
        Additive emission smoothing (tokens unseen in a group keep a small probability).
    prior : {"empirical", "uniform"}
        Class prior: share of training sequences, or equal.
    n_jobs : int
        Worker processes for the restarts (``-1`` = all cores).

    Attributes
    ----------
    classes_ : ndarray of str
    models_ : list of PhaseModel
        One model per class, in ``classes_`` order.
    n_states_ : list of int
        State count of each class model.
    log_prior_ : ndarray
    vocab_ : list of str

    Notes
    -----
    ``X`` is a :class:`~seqmine.encoding.sequences.SequenceDB` (``y`` defaults to its group
    names; sequences without a group are left out of ``fit``) or a list of int
    token arrays (then ``y`` is required and the vocabulary is ``0..max id``).
    Sequences of any length, including empty ones, can be scored; an empty
    sequence gets the prior.

    Examples
    --------
    >>> db = SequenceDB.from_lists([["a", "a", "b"]] * 6 + [["b", "b", "a"]] * 6,
    ...                            groups=["x"] * 6 + ["y"] * 6)
    >>> clf = GroupHMMClassifier(n_states=2, n_restarts=2, random_state=0).fit(db)
    >>> clf.classes_.tolist()
    ['x', 'y']
    >>> clf.predict(db).tolist() == ["x"] * 6 + ["y"] * 6
    True
    """

    def __init__(self, *, n_states=3, n_restarts=DEFAULT_CONFIG["phases"]["n_restarts"],
                 random_state=DEFAULT_CONFIG["seed"], n_iter=DEFAULT_CONFIG["phases"]["n_iter"],
                 tol=1e-4, emission_floor=DEFAULT_EMISSION_FLOOR, prior="empirical",
                 n_jobs=DEFAULT_CONFIG["n_jobs"]):
        self.n_states = n_states
        self.n_restarts = n_restarts
        self.random_state = random_state
        self.n_iter = n_iter
        self.tol = tol
        self.emission_floor = emission_floor
        self.prior = prior
        self.n_jobs = n_jobs

    def fit(self, X, y=None):
        """Fit one phase model per class; returns ``self``."""
        where = "GroupHMMClassifier"
        state_counts = parse_state_range(self.n_states)
        n_restarts = check_int(self.n_restarts, "n_restarts", where, minimum=1)
        check_number(self.emission_floor, "emission_floor", where, minimum=0)
        check_choice(self.prior, "prior", ("empirical", "uniform"), where)
        seqs, labels, vocab = self._training_data(X, y)
        classes = np.unique(labels)
        if len(classes) < 2:
            raise ParameterError(
                f"GroupHMMClassifier needs sequences of at least 2 groups to fit; got "
                f"{len(classes)} ({', '.join(map(str, classes)) or 'none'}).")
        models, counts = [], []
        for k, c in enumerate(classes):
            members = [s for s, lab in zip(seqs, labels) if lab == c]
            counts.append(len(members))
            kw = dict(n_restarts=n_restarts, random_state=self.random_state, n_jobs=self.n_jobs,
                      n_iter=self.n_iter, tol=self.tol, emission_floor=self.emission_floor,
                      vocab=vocab, label=str(c), stream=100 + k)
            if len(state_counts) == 1:
                models.append(_fit_phase_model(members, n_states=state_counts[0], **kw))
            else:
                table, by_count = _select_n_states(members, n_states=state_counts, n_splits=0,
                                                   learners=None, **kw)
                best = int(table.loc[table["best_bic"], "n_states"].iloc[0])
                models.append(by_count[best])
        counts = np.asarray(counts, dtype=np.float64)
        if self.prior == "uniform":
            self.log_prior_ = np.full(len(classes), -np.log(len(classes)))
        else:
            self.log_prior_ = np.log(counts / counts.sum())
        self.classes_ = classes
        self.models_ = models
        self.n_states_ = [m.n_states for m in models]
        self.vocab_ = vocab
        return self

    def log_likelihoods(self, X):
        """``log P(O | model_c)`` per sequence and class, shape (n_sequences, n_classes)."""
        self._check_fitted()
        Xf, lengths = self._score_data(X)
        cols = [_hmm.forward_loglik(m.startprob, m.transmat, m.emissionprob, Xf, lengths)
                for m in self.models_]
        return np.column_stack(cols)

    def predict_log_proba(self, X):
        """Log posterior class probabilities, shape (n_sequences, n_classes)."""
        joint = self.log_likelihoods(X) + self.log_prior_[None, :]
        return joint - logsumexp(joint, axis=1, keepdims=True)

    def predict_proba(self, X):
        """Posterior class probabilities, shape (n_sequences, n_classes)."""
        return np.exp(self.predict_log_proba(X))

    def decision_function(self, X):
        """Log posterior odds; shape (n,) for two classes (positive favours ``classes_[1]``)."""
        joint = self.log_likelihoods(X) + self.log_prior_[None, :]
        if len(self.classes_) == 2:
            return joint[:, 1] - joint[:, 0]
        return joint

    def predict(self, X):
        """Most probable class of each sequence."""
        joint = self.log_likelihoods(X) + self.log_prior_[None, :]
        return self.classes_[np.argmax(joint, axis=1)]

    # ------------------------------------------------------------ helpers
    def _check_fitted(self):
        if not hasattr(self, "models_"):
            raise NotFittedError("This GroupHMMClassifier is not fitted yet; call fit first.")

    def _training_data(self, X, y):
        if isinstance(X, SequenceDB):
            seqs = [X.sequence(i) for i in range(X.n_sequences)]
            if y is None:
                keep = X.groups >= 0
                labels = np.array([X.group_names[g] if g >= 0 else "" for g in X.groups],
                                  dtype=object)
            else:
                labels = np.asarray(y, dtype=object)
                keep = np.ones(len(seqs), dtype=bool)
            vocab = list(X.vocab)
        else:
            seqs = [np.asarray(s, dtype=np.int64).ravel() for s in X]
            if y is None:
                raise ParameterError("GroupHMMClassifier.fit needs y when X is a list of "
                                     "token arrays (or pass a SequenceDB with groups).")
            labels = np.asarray(y, dtype=object)
            keep = np.ones(len(seqs), dtype=bool)
            top = max((int(s.max()) for s in seqs if len(s)), default=0)
            vocab = [str(j) for j in range(top + 1)]
        if len(labels) != len(seqs):
            raise ParameterError(f"y has {len(labels)} labels for {len(seqs)} sequences.")
        seqs = [s for s, k in zip(seqs, keep) if k]
        labels = np.array([str(v) for v, k in zip(labels, keep) if k], dtype=object)
        return seqs, labels.astype(str), vocab

    def _score_data(self, X):
        if isinstance(X, SequenceDB):
            if X.vocab != self.vocab_:
                raise ParameterError(
                    "The SequenceDB vocabulary differs from the one GroupHMMClassifier was "
                    "fitted on; encode both with the same vocabulary.")
            return X.tokens.astype(np.int64), X.lengths
        seqs = [np.asarray(s, dtype=np.int64).ravel() for s in X]
        lengths = np.array([len(s) for s in seqs], dtype=np.int64)
        Xf = np.concatenate(seqs) if seqs else np.zeros(0, dtype=np.int64)
        if len(Xf) and (Xf.min() < 0 or Xf.max() >= len(self.vocab_)):
            raise ParameterError(
                f"Token ids must lie in 0..{len(self.vocab_) - 1}; got "
                f"{int(Xf.min())}..{int(Xf.max())}.")
        return Xf, lengths
