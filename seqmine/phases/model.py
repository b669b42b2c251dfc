"""A fitted phase model: a categorical hidden Markov model over a token vocabulary."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd

from .._util.outdir import open_new
from ..config import DEFAULT_CONFIG
from ..encoding.sequences import SequenceDB
from ..errors import DataFileError, ParameterError
from . import _hmm

__all__ = ["PhaseModel", "name_state"]

_FORMAT = "seqmine-phase-model"
_VERSION = 1


def name_state(emission_row, vocab, *, mass=0.5, max_tokens=2):
    """Readable name of a state from its dominant emitted tokens.

    Tokens are taken in order of decreasing probability until they cover ``mass``
    of the emission probability or ``max_tokens`` are taken, and joined by ``" + "``.

    Examples
    --------
    >>> name_state([0.1, 0.6, 0.3], ["open_chart", "measure_height", "pause:long"])
    'measure_height'
    >>> name_state([0.1, 0.45, 0.45], ["open_chart", "measure_height", "pause:long"])
    'measure_height + pause:long'
    """
    row = np.asarray(emission_row, dtype=np.float64)
    order = np.argsort(-row, kind="stable")
    names, total = [], 0.0
    for j in order[:max_tokens]:
        names.append(str(vocab[j]))
        total += row[j]
        if total >= mass:
            break
    return " + ".join(names)


@dataclass
class PhaseModel:
    """Categorical-emission hidden Markov model with named states.

    States are labelled ``S1 .. SN``; every model shares the full vocabulary of
    the SequenceDB it was fitted on, and emission rows are smoothed (see
    ``emission_floor``) so that no token has probability 0.

    Parameters
    ----------
    startprob : ndarray, shape (N,)
    transmat : ndarray, shape (N, N)
        ``transmat[i, j] = P(state j at t+1 | state i at t)``.
    emissionprob : ndarray, shape (N, M)
    vocab : list of str, length M
    label : str
        Which data the model was fitted to (``"pooled"`` or a group name).
    log_likelihood : float
        Total log-likelihood on the training data (NaN when built by hand).
    n_observations : int
        Number of training tokens (0 when built by hand).
    emission_floor : float
        Additive smoothing applied to the emission rows after fitting.
    info : dict
        Plain-data details of the fit (restarts, iterations, seed ...).

    Examples
    --------
    >>> m = PhaseModel.from_parameters([0.8, 0.2], [[0.6, 0.4], [0.5, 0.5]],
    ...                                [[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]], ["1", "2", "3"])
    >>> round(float(np.exp(m.score_tokens([[2, 0, 2]])[0])), 6)
    0.028562
    """

    startprob: np.ndarray
    transmat: np.ndarray
    emissionprob: np.ndarray
    vocab: list
    label: str = "model"
    log_likelihood: float = float("nan")
    n_observations: int = 0
    emission_floor: float = 0.0
    info: dict = field(default_factory=dict)

    def __post_init__(self):
        self.startprob = np.asarray(self.startprob, dtype=np.float64)
        self.transmat = np.atleast_2d(np.asarray(self.transmat, dtype=np.float64))
        self.emissionprob = np.atleast_2d(np.asarray(self.emissionprob, dtype=np.float64))
        self.vocab = [str(v) for v in self.vocab]
        n = len(self.startprob)
        if self.transmat.shape != (n, n) or self.emissionprob.shape != (n, len(self.vocab)):
            raise ParameterError(
                f"PhaseModel shapes disagree: startprob has {n} states, transmat "
                f"{self.transmat.shape}, emissionprob {self.emissionprob.shape}, vocabulary "
                f"{len(self.vocab)} tokens; transmat must be (N, N) and emissionprob (N, M)."
            )
        for name, arr in (("startprob", self.startprob), ("transmat", self.transmat),
                          ("emissionprob", self.emissionprob)):
            if np.any(arr < 0) or not np.allclose(arr.sum(axis=-1), 1.0, atol=1e-8):
                raise ParameterError(
                    f"PhaseModel {name} must hold probabilities summing to 1 per row.")

    # ---------------------------------------------------------- construction
    @classmethod
    def from_parameters(cls, startprob, transmat, emissionprob, vocab=None, *, label="model"):
        """Build a model from fixed parameters (vocabulary defaults to ``"0", "1", ...``)."""
        B = np.atleast_2d(np.asarray(emissionprob, dtype=np.float64))
        if vocab is None:
            vocab = [str(j) for j in range(B.shape[1])]
        return cls(startprob=startprob, transmat=transmat, emissionprob=B, vocab=list(vocab),
                   label=label)

    # ---------------------------------------------------------------- sizes
    @property
    def n_states(self):
        """Number of hidden states N."""
        return len(self.startprob)

    @property
    def n_symbols(self):
        """Number of vocabulary tokens M."""
        return len(self.vocab)

    @property
    def n_free_parameters(self):
        """``(N-1) + N(N-1) + N(M-1)``."""
        return _hmm.n_free_parameters(self.n_states, self.n_symbols)

    @property
    def state_labels(self):
        """``["S1", ..., "SN"]``."""
        return [f"S{i + 1}" for i in range(self.n_states)]

    @property
    def state_names(self):
        """Readable name of each state from its dominant tokens."""
        return [name_state(row, self.vocab) for row in self.emissionprob]

    @property
    def dwell_times(self):
        """Expected dwell time of each state in tokens, ``1 / (1 - a_ii)`` (inf if a_ii = 1)."""
        stay = np.diag(self.transmat)
        with np.errstate(divide="ignore"):
            return np.where(stay < 1.0, 1.0 / (1.0 - np.minimum(stay, 1.0)), np.inf)

    # -------------------------------------------------------------- scoring
    def score_tokens(self, sequences, lengths=None):
        """Log-likelihood of each sequence.

        Parameters
        ----------
        sequences : SequenceDB, list of int arrays, or flat int array with ``lengths``
            Token ids of this model's vocabulary.

        Returns
        -------
        ndarray of float, shape (n_sequences,)
        """
        X, lengths = self._as_arrays(sequences, lengths)
        return _hmm.forward_loglik(self.startprob, self.transmat, self.emissionprob, X, lengths)

    def score(self, sequences, lengths=None):
        """Total log-likelihood ``sum_i log P(O_i | model)``."""
        return float(self.score_tokens(sequences, lengths).sum())

    def bic(self, sequences, lengths=None):
        """Bayesian information criterion ``-2 log L + k ln n`` (n = number of tokens)."""
        X, lengths = self._as_arrays(sequences, lengths)
        ll = float(_hmm.forward_loglik(self.startprob, self.transmat, self.emissionprob,
                                       X, lengths).sum())
        return -2.0 * ll + self.n_free_parameters * math.log(max(len(X), 1))

    def decode(self, sequences, lengths=None):
        """Viterbi paths.

        Returns
        -------
        logprob : float
            ``sum_i log P(O_i, best path_i | model)``.
        states : ndarray of int, shape (n_tokens,)
            Concatenated state indices (0-based; label ``S{k+1}``).
        """
        X, lengths = self._as_arrays(sequences, lengths)
        return _hmm.viterbi(self.startprob, self.transmat, self.emissionprob, X, lengths)

    def sample(self, lengths, random_state=DEFAULT_CONFIG["seed"]):
        """Sample sequences of the given lengths; returns ``(X, states)`` concatenated.

        ``random_state`` is a seed or a ``numpy.random.Generator`` (drawn from in place).
        """
        rng = (random_state if isinstance(random_state, np.random.Generator)
               else np.random.default_rng(random_state))
        return _hmm.sample_sequences(self.startprob, self.transmat, self.emissionprob,
                                     lengths, rng)

    # ---------------------------------------------------------- description
    def describe_states(self, top=3):
        """One row per state.

        Returns
        -------
        pandas.DataFrame
            Columns ``model``, ``state`` (S1..), ``name``, ``start_prob``,
            ``stay_prob`` (a_ii), ``dwell`` (expected tokens, 1/(1-a_ii)),
            ``occupancy`` (expected share of training tokens, NaN if unknown),
            ``top_tokens`` ("token p; token p; ...").
        """
        occ = self.info.get("occupancy")
        rows = []
        for i in range(self.n_states):
            rows.append({
                "model": self.label,
                "state": self.state_labels[i],
                "name": self.state_names[i],
                "start_prob": float(self.startprob[i]),
                "stay_prob": float(self.transmat[i, i]),
                "dwell": float(self.dwell_times[i]),
                "occupancy": float(occ[i]) if occ is not None else float("nan"),
                "top_tokens": self.top_tokens(i, top),
            })
        return pd.DataFrame(rows, columns=["model", "state", "name", "start_prob", "stay_prob",
                                           "dwell", "occupancy", "top_tokens"])

    def top_tokens(self, state, top=3):
        """``"token 0.412; token 0.300"`` for the ``top`` most probable tokens of a state."""
        row = self.emissionprob[state]
        order = np.argsort(-row, kind="stable")[:top]
        return "; ".join(f"{self.vocab[j]} {row[j]:.3f}" for j in order)

    def to_graph(self, threshold=0.05, top=3):
        """The model as a networkx DiGraph.

        Nodes are state labels with attributes ``name``, ``top_tokens``, ``dwell``,
        ``start_prob``, ``occupancy``; an edge ``i -> j`` (self-loops included) is
        present when ``transmat[i, j] >= threshold`` and carries ``probability``.
        """
        g = nx.DiGraph(model=self.label)
        desc = self.describe_states(top)
        for row in desc.itertuples(index=False):
            occ = row.occupancy if np.isfinite(row.occupancy) else -1.0
            g.add_node(row.state, name=row.name, top_tokens=row.top_tokens,
                       dwell=float(row.dwell), start_prob=float(row.start_prob),
                       occupancy=float(occ))
        labels = self.state_labels
        for i in range(self.n_states):
            for j in range(self.n_states):
                p = float(self.transmat[i, j])
                if p >= threshold:
                    g.add_edge(labels[i], labels[j], probability=p)
        return g

    def write_graphml(self, path, threshold=0.05):
        """Write :meth:`to_graph` as GraphML."""
        with open_new(path, "wb") as fh:
            nx.write_graphml(self.to_graph(threshold), fh)
        return Path(path)

    # ------------------------------------------------------------- storage
    def to_dict(self):
        """Plain-data form (lists and numbers) for JSON."""
        info = {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in self.info.items()}
        return {
            "format": _FORMAT, "version": _VERSION, "label": self.label,
            "vocab": list(self.vocab),
            "startprob": self.startprob.tolist(),
            "transmat": self.transmat.tolist(),
            "emissionprob": self.emissionprob.tolist(),
            "state_labels": self.state_labels,
            "state_names": self.state_names,
            "log_likelihood": None if math.isnan(self.log_likelihood) else self.log_likelihood,
            "n_observations": int(self.n_observations),
            "emission_floor": float(self.emission_floor),
            "info": info,
        }

    @classmethod
    def from_dict(cls, data, source="model"):
        """Rebuild a model from :meth:`to_dict` output."""
        if not isinstance(data, dict) or data.get("format") != _FORMAT:
            raise DataFileError(f"{source}: not a seqmine phase model (format {_FORMAT!r}).")
        if data.get("version") != _VERSION:
            raise DataFileError(
                f"{source}: phase model version {data.get('version')!r} is not supported "
                f"(this seqmine reads version {_VERSION}); re-run 'seqmine phases'.")
        ll = data.get("log_likelihood")
        info = dict(data.get("info") or {})
        if "occupancy" in info and info["occupancy"] is not None:
            info["occupancy"] = np.asarray(info["occupancy"], dtype=np.float64)
        return cls(startprob=data["startprob"], transmat=data["transmat"],
                   emissionprob=data["emissionprob"], vocab=data["vocab"],
                   label=str(data.get("label", "model")),
                   log_likelihood=float("nan") if ll is None else float(ll),
                   n_observations=int(data.get("n_observations", 0)),
                   emission_floor=float(data.get("emission_floor", 0.0)), info=info)

    def save(self, path):
        """Write the model as plain JSON (no executable object serialisation)."""
        path = Path(path)
        with open_new(path) as fh:
            fh.write(json.dumps(self.to_dict(), indent=1, sort_keys=True))
        return path

    @classmethod
    def load(cls, path):
        """Read a model written by :meth:`save`."""
        path = Path(path)
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise DataFileError(f"{path}: no such phase model file.") from None
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise DataFileError(f"{path}: unreadable JSON ({exc}).") from None
        return cls.from_dict(data, source=str(path))

    def equals(self, other):
        """True if both models have identical parameters, vocabulary and label."""
        return (isinstance(other, PhaseModel)
                and self.label == other.label and self.vocab == other.vocab
                and np.array_equal(self.startprob, other.startprob)
                and np.array_equal(self.transmat, other.transmat)
                and np.array_equal(self.emissionprob, other.emissionprob)
                and (self.log_likelihood == other.log_likelihood
                     or (math.isnan(self.log_likelihood) and math.isnan(other.log_likelihood)))
                and self.n_observations == other.n_observations
                and self.emission_floor == other.emission_floor)

    # ------------------------------------------------------------- helpers
    def _as_arrays(self, sequences, lengths=None):
        if isinstance(sequences, SequenceDB):
            if sequences.vocab != self.vocab:
                raise ParameterError(
                    f"The SequenceDB vocabulary ({len(sequences.vocab)} tokens) differs from "
                    f"the model's ({self.n_symbols} tokens); score data encoded with the "
                    f"same vocabulary the model was fitted on.")
            X, lengths = sequences.tokens, sequences.lengths
        elif lengths is not None:
            X = np.asarray(sequences)
            lengths = np.asarray(lengths, dtype=np.int64)
            if lengths.sum() != len(X):
                raise ParameterError(
                    f"lengths sum to {int(lengths.sum())} but there are {len(X)} tokens.")
        else:
            seqs = [np.asarray(s).ravel() for s in sequences]
            seqs = [s if len(s) else s.astype(np.int64) for s in seqs]
            lengths = np.array([len(s) for s in seqs], dtype=np.int64)
            X = np.concatenate(seqs) if seqs else np.zeros(0, dtype=np.int64)
        X = np.asarray(X)
        if len(X) and X.dtype.kind not in "iu":
            raise ParameterError("Sequences must hold integer token ids.")
        X = X.astype(np.int64, copy=False)
        if len(X) and (X.min() < 0 or X.max() >= self.n_symbols):
            raise ParameterError(
                f"Largest token id is {int(X.max())} but the model only emits ids up to "
                f"{self.n_symbols - 1}.")
        return X, np.asarray(lengths, dtype=np.int64)
