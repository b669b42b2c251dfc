"""Learner-level cross-validation of the whole discovery pipeline and early prediction.

Every step that learns from the logs -- the pause-bin edges, pattern mining,
differential selection and the group HMMs -- is fitted on the training learners of a
fold only, then applied unchanged to the held-out learners, whose sequences are cut
to their first 10 %, 20 %, ... of events and classified. The outcome groups are the
labels being predicted: they are decided once from the outcome table (rule and cut
points) and stay fixed in every fold, so every grouped learner is scored. The split
into folds is repeated with fresh shuffles and the metrics are averaged over the
repetitions, with their spread.
Findings are correlational; a detector built on them should be piloted and reviewed
by educators before it drives hints for real learners.
"""

from __future__ import annotations

import copy
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.dummy import DummyClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import FeatureUnion, make_pipeline
from sklearn.preprocessing import StandardScaler

from .._util.checks import check_choice, check_fraction, check_int, check_jobs, check_number
from .._util.csvio import write_csv
from .._util.folds import learner_splits as _learner_splits
from .._util.jsonio import write_json
from .._util.parallel import parallel_map
from .._util.progress import progress
from ..config import CLASSIFIERS, DEFAULT_CONFIG, DEFAULT_FRACTIONS
from ..errors import ParameterError
from .features import (
    FrequencyPauseFeaturizer,
    HMMLikelihoodFeaturizer,
    PatternFeaturizer,
)
from .metrics import early_prediction_table, metric_names

__all__ = [
    "validate",
    "ValidationResult",
    "learner_splits",
    "early_prediction_table",
    "default_featurizers",
    "make_classifier",
    "CLASSIFIERS",
    "DEFAULT_FRACTIONS",
    "HMM_CLASSIFIERS",
]

_DEFAULTS = DEFAULT_CONFIG["validate"]
_SEED = DEFAULT_CONFIG["seed"]

#: Classifiers that use the HMM featurizer (the expensive one; see ``n_repeats_hmm``).
HMM_CLASSIFIERS = tuple(n for n, f in CLASSIFIERS.items() if "hmm" in f)

def validate(events, outcomes, *, n_splits=_DEFAULTS["n_splits"],
             n_repeats=_DEFAULTS["n_repeats"], n_repeats_hmm=_DEFAULTS["n_repeats_hmm"],
             loo=False, fractions=DEFAULT_FRACTIONS, grouping=None, encoder=None,
             featurizers=None, classifiers=None, C=1.0, train_on="full",
             n_bootstrap=_DEFAULTS["n_bootstrap"], confidence=0.95,
             alpha=DEFAULT_CONFIG["contrast"]["alpha"], random_state=_SEED,
             n_jobs=DEFAULT_CONFIG["n_jobs"], scheduler=None):
    """Cross-validate the discovery pipeline by learner and measure early prediction.

    Parameters
    ----------
    events : pandas.DataFrame or LoadResult
        Event table (``learner``, ``time`` in seconds, ``action``, ...), as in
        ``load_events(...).events`` (a LoadResult is accepted too).
    outcomes : pandas.DataFrame
        Outcome table with a ``learner`` column, as from ``load_outcomes``.
    n_splits : int, default 5
        Number of stratified folds (ignored when ``loo``).
    n_repeats : int >= 1, default 3
        The k-fold split is repeated this many times with fresh shuffles (repeated
        cross-validation); metrics are averaged over the repetitions and their
        lowest and highest value reported. Ignored with ``loo`` (one split only).
    n_repeats_hmm : int >= 1, default 1
        Classifiers that use the HMM featurizer (:data:`HMM_CLASSIFIERS`: ``hmm`` and
        ``fusion``) run in the first ``min(n_repeats_hmm, n_repeats)`` repetitions
        only: fitting group HMMs in every fold costs much more than the other
        featurizers, so by default they get one repetition and the cheap classifiers
        the rest. The baseline test of each classifier uses the repetitions it ran in.
    loo : bool, default False
        Leave one learner out instead of k folds (see Notes on the baseline).
    fractions : sequence of float in (0, 1]
        Observed fractions of each held-out sequence (of its action events, see
        :meth:`SequenceDB.cut`); default :data:`DEFAULT_FRACTIONS`.
    grouping : estimator, optional
        Outcome grouping with ``fit(outcomes)``, ``transform(outcomes)`` (learner ->
        group name, NaN = none) and ``group_names_``. It is fitted once on the whole
        outcome table (unless it is fitted already, i.e. has ``group_names_``) and its
        labels are used unchanged in every fold. Default
        ``seqmine.inputs.outcomes.Grouping()`` (median split on normalized gain).
    encoder : estimator, optional
        Unfitted encoder with ``fit(events)``, ``transform(events) -> SequenceDB``
        and ``encoding_``. Default ``seqmine.encoding.encoder.Encoder()``.
    featurizers : dict, optional
        Name -> unfitted featurizer; default :func:`default_featurizers`.
    classifiers : sequence of str, optional
        Names from :data:`CLASSIFIERS` to compare (default: all five).
    C : float, default 1.0
        Inverse L2 regularisation strength of the logistic regression.
    train_on : {"full", "matched"}, default "full"
        ``"full"``: the classifiers are trained on the full training sequences and
        applied to every cut of the held-out ones. ``"matched"``: for each
        fraction the classifiers (not the discovery steps) are re-trained on the
        training sequences cut to the same fraction, so training and test see
        equally long beginnings.
    n_bootstrap : int, default 500
        Bootstrap resamples of the held-out learners for the confidence intervals.
    confidence : float, default 0.95
    alpha : float, default 0.05
        Level of the one-sided test against the majority baseline.
    random_state : int, default 20261202
        Seeds the fold splits, the featurizers and the bootstrap.
    n_jobs : int, default 1
        Folds (of all repetitions) run in this many local processes (joblib; -1 = all cores); results are
        identical to the serial run.
    scheduler : str, optional
        Run the folds on a Dask cluster: a scheduler address (``"tcp://host:8786"``)
        or ``"local"`` for a local cluster with ``n_jobs`` workers. Results are
        identical to the serial run.

    Returns
    -------
    ValidationResult

    Notes
    -----
    *Classifiers* (:data:`CLASSIFIERS`): ``pattern`` -- rates of the patterns
    selected on the training fold (:class:`~seqmine.validation.features.PatternFeaturizer`);
    ``hmm`` -- per-token log-likelihood ratio between the group HMMs
    (:class:`~seqmine.validation.features.HMMLikelihoodFeaturizer`); ``frequency_pause`` --
    relative action frequencies plus mean and sd of log pauses
    (:class:`~seqmine.validation.features.FrequencyPauseFeaturizer`); ``fusion`` -- the three
    feature sets stacked into one model; each of these is standardised and fed to an
    L2-regularised logistic regression. ``majority`` predicts the training fold's
    most frequent group (:class:`~sklearn.dummy.DummyClassifier`).

    *Groups are fixed once.* The outcome groups are what is predicted, not features
    learnt from the logs: the grouping rule and its cut points are applied once to
    the whole outcome table, every learner with events and a group is held out once
    per repetition and scored, and the folds are stratified by these groups.
    Held-out learners are encoded with the training fold's pause edges. By default classifiers are trained on the full
    training sequences and applied to the cut held-out sequences (see
    ``train_on``); pattern features are rates per 100 tokens so their scale does
    not depend on sequence length. When
    a learner has several sequences, the predicted probabilities of its sequences
    are averaged and the learner is the unit of every metric.

    Learners with events but no outcome, or whose outcome gives no group (e.g. the
    middle of a ``fraction`` split), take no part.

    *Repetitions.* Repetition 0 uses ``random_state`` for the shuffle of the stratified
    split, repetition ``r`` a seed derived from ``(random_state, r)``; a different
    assignment of learners to folds (for example after pseudonymization renamed
    them) moves single-split results, and the spread over repetitions shows by how
    much.

    With leave-one-out, fixed labels and balanced groups the majority baseline is
    always wrong (the held-out learner's group is the training minority), which
    flatters every classifier; prefer k folds for the comparison with the baseline.
    """
    where = "validate"
    fractions = _check_fractions(fractions)
    check_int(n_bootstrap, "n_bootstrap", where, minimum=1)
    check_fraction(confidence, "confidence", where, high_inclusive=False)
    check_fraction(alpha, "alpha", where, high_inclusive=False)
    check_number(C, "C", where, minimum=0, strict=True)
    check_choice(train_on, "train_on", ("full", "matched"), where)
    check_jobs(n_jobs, "n_jobs", where)
    n_repeats = check_int(n_repeats, "n_repeats", where, minimum=1)
    n_repeats_hmm = check_int(n_repeats_hmm, "n_repeats_hmm", where, minimum=1)
    names = list(CLASSIFIERS) if classifiers is None else list(classifiers)
    for n in names:
        if n not in CLASSIFIERS:
            raise ParameterError(
                f"Unknown classifier {n!r}; choose from {', '.join(CLASSIFIERS)}.")
    if "majority" not in names:
        names.append("majority")
    grouping = grouping if grouping is not None else _default_grouping()
    encoder = encoder if encoder is not None else _default_encoder()
    featurizers = (featurizers if featurizers is not None
                   else default_featurizers(random_state=random_state))
    needed = sorted({f for n in names for f in CLASSIFIERS[n]})
    missing = [f for f in needed if f not in featurizers]
    if missing:
        raise ParameterError(f"featurizers lacks {missing}; give one for each of {needed}.")
    featurizers = {f: featurizers[f] for f in needed}
    if loo:
        n_repeats = 1
    n_repeats_hmm = min(n_repeats_hmm, n_repeats)

    started = time.perf_counter()
    if not isinstance(events, pd.DataFrame) and hasattr(events, "events"):
        events = events.events
    events = pd.DataFrame(events)
    outcomes = pd.DataFrame(outcomes)
    for table, label in ((events, "events"), (outcomes, "outcomes")):
        if "learner" not in table.columns:
            raise ParameterError(f"The {label} table needs a 'learner' column.")
    events = events.assign(learner=events["learner"].astype(str))
    outcomes = outcomes.assign(learner=outcomes["learner"].astype(str))
    # the groups are the labels being predicted: decided once, from the outcome table
    if not hasattr(grouping, "group_names_"):
        grouping = _fresh(grouping).fit(outcomes)
    group_names = [str(g) for g in grouping.group_names_]
    groups = _group_series(grouping.transform(outcomes), outcomes)
    has_events = set(events["learner"].unique())
    learners = np.array(sorted(lr for lr, g in groups.items()
                               if lr in has_events and not pd.isna(g)), dtype=object)
    labels = np.array([str(groups[lr]) for lr in learners], dtype=object)
    splits = [learner_splits(learners, labels, n_splits=n_splits, loo=loo,
                             random_state=_repeat_seed(random_state, r))
              for r in range(n_repeats)]
    cheap = [n for n in names if n not in HMM_CLASSIFIERS]
    jobs = [(r, k, learners[tr], learners[te], names if r < n_repeats_hmm else cheap)
            for r, split in enumerate(splits) for k, (tr, te) in enumerate(split)]
    run = _FoldRunner(events=events, groups=dict(zip(learners, labels)),
                      group_names=group_names, encoder=encoder, featurizers=featurizers,
                      fractions=fractions, C=C, train_on=train_on)
    if n_jobs == 1 and not scheduler:
        outs = [run(job) for job in progress(jobs, desc="folds", unit="fold")]
    else:
        outs = parallel_map(run, jobs, n_jobs=n_jobs, scheduler=scheduler)
    predictions = pd.concat([o["predictions"] for o in outs], ignore_index=True)
    order = {n: i for i, n in enumerate(names)}
    predictions = predictions.sort_values(
        ["classifier", "repeat", "fraction", "learner"], key=lambda s: s.map(order)
        if s.name == "classifier" else s, kind="mergesort", ignore_index=True)
    metrics = early_prediction_table(predictions, group_names, n_bootstrap=n_bootstrap,
                                     confidence=confidence, alpha=alpha,
                                     random_state=random_state)
    fold_table = pd.DataFrame({
        "learner": np.concatenate([learners[te] for split in splits for _, te in split]),
        "repeat": np.concatenate([np.full(len(te), r) for r, split in enumerate(splits)
                                  for _, te in split]),
        "fold": np.concatenate([np.full(len(te), k) for split in splits
                                for k, (_, te) in enumerate(split)]),
    }).sort_values(["repeat", "learner"], kind="mergesort", ignore_index=True)
    settings = {
        "n_splits": None if loo else int(n_splits), "loo": bool(loo),
        "n_repeats": int(n_repeats), "n_repeats_hmm": int(n_repeats_hmm),
        "fractions": list(fractions), "classifiers": names, "C": float(C),
        "train_on": train_on,
        "n_bootstrap": int(n_bootstrap), "confidence": float(confidence),
        "alpha": float(alpha), "random_state": int(random_state),
        "test": "one-sided sign test on per-learner correctness vs majority (exact "
                "McNemar with one repetition)",
        "grouping": _grouping_record(grouping),
        "n_learners": int(len(learners)),
        "n_learners_per_group": {g: int(np.sum(labels == g)) for g in group_names},
        "n_learners_without_outcome_group": int(len(has_events - set(learners))),
    }
    return ValidationResult(
        metrics=metrics, predictions=predictions, folds=fold_table,
        selected_patterns={(o["repeat"], o["fold"]): o["selected_patterns"] for o in outs},
        encodings={(o["repeat"], o["fold"]): o["encoding"] for o in outs},
        group_names=list(group_names), settings=settings,
        runtime_seconds=time.perf_counter() - started,
    )


@dataclass
class ValidationResult:
    """Outcome of :func:`validate`.

    Attributes
    ----------
    metrics : pandas.DataFrame
        The early-prediction table (see :func:`early_prediction_table`).
    predictions : pandas.DataFrame
        One row per held-out learner x classifier x repetition x fraction:
        ``repeat``, ``fold``, ``learner``, ``group`` (true, fixed once from the
        outcome table), ``classifier``, ``fraction``, ``predicted``,
        ``proba_<group>``.
    folds : pandas.DataFrame
        ``learner``, ``repeat``, ``fold`` (the fold in which the learner was held out
        in that repetition).
    selected_patterns : dict
        ``(repeat, fold)`` -> readable names of the patterns selected on that fold's
        training learners.
    encodings : dict
        ``(repeat, fold)`` -> the encoder's ``encoding_`` fitted on that fold's
        training events.
    group_names : list of str
    settings : dict
    runtime_seconds : float
        Wall time of the run (not part of any table, so reruns compare equal).
    """

    metrics: pd.DataFrame
    predictions: pd.DataFrame
    folds: pd.DataFrame
    selected_patterns: dict
    encodings: dict
    group_names: list
    settings: dict = field(default_factory=dict)
    runtime_seconds: float = float("nan")

    def to_frame(self):
        """The early-prediction table (one row per classifier x fraction)."""
        return self.metrics.copy()

    def to_long(self):
        """Plot-ready long table: ``classifier``, ``fraction``, ``metric``, ``value``,
        ``low``, ``high``, ``n_learners``."""
        m = self.metrics
        names = metric_names(self.group_names)
        rows = []
        for name in names:
            part = m[["classifier", "fraction", "n_learners"]].copy()
            part["metric"] = name
            for suffix, col in (("", "value"), ("_low", "low"), ("_high", "high"),
                                ("_min", "repeat_min"), ("_max", "repeat_max")):
                part[col] = m[f"{name}{suffix}"].to_numpy() if f"{name}{suffix}" in m else np.nan
            rows.append(part)
        out = pd.concat(rows, ignore_index=True)
        return out[["classifier", "fraction", "metric", "value", "low", "high", "repeat_min",
                    "repeat_max", "n_learners"]]

    def earliest_fraction(self, *, sustained=False):
        """Smallest fraction at which each classifier beats the majority baseline.

        "Beats" means the one-sided sign test on per-learner correctness (the exact
        McNemar test with one repetition) rejects at ``alpha`` (see
        :func:`early_prediction_table`).

        Parameters
        ----------
        sustained : bool, default False
            Only count a fraction if the classifier also beats the baseline at
            every larger fraction.

        Returns
        -------
        pandas.Series
            Classifier -> fraction (NaN when it never does), majority excluded.
        """
        m = self.metrics[self.metrics["classifier"] != "majority"]
        out = {}
        for name, part in m.groupby("classifier", sort=False):
            part = part.sort_values("fraction")
            beats = part["beats_baseline"].to_numpy(dtype=bool)
            if sustained:
                beats = np.logical_and.accumulate(beats[::-1])[::-1]
            hits = part["fraction"].to_numpy()[beats]
            out[name] = float(hits.min()) if len(hits) else float("nan")
        return pd.Series(out, name="earliest_fraction", dtype=float)

    def summary(self):
        """A JSON-ready digest (for ``summary.json`` and the report).

        Keys: ``settings``, ``group_names``, ``earliest_fraction`` and
        ``earliest_fraction_sustained`` (classifier -> fraction or None),
        ``beats_baseline`` (true when any classifier beats the majority baseline
        at some fraction), ``accuracy`` and ``balanced_accuracy`` (classifier ->
        fraction -> value), ``baseline_accuracy`` (fraction -> value),
        ``patterns_selected_per_fold`` (``"repeat/fold"`` -> count) and
        ``runtime_seconds`` (rounded to 0.1 s).
        """
        m = self.metrics

        def nested(col):
            return {name: {f"{f:g}": round(float(v), 6) for f, v in
                           zip(part["fraction"], part[col])}
                    for name, part in m.groupby("classifier", sort=False)}

        def clean(series):
            return {k: (None if np.isnan(v) else float(v)) for k, v in series.items()}

        base = m[m["classifier"] == "majority"]
        earliest = clean(self.earliest_fraction())
        return {
            "settings": dict(self.settings),
            "group_names": list(self.group_names),
            "earliest_fraction": earliest,
            "earliest_fraction_sustained": clean(self.earliest_fraction(sustained=True)),
            "beats_baseline": any(v is not None for v in earliest.values()),
            "accuracy": nested("accuracy"),
            "balanced_accuracy": nested("balanced_accuracy"),
            "baseline_accuracy": {f"{f:g}": round(float(v), 6) for f, v in
                                  zip(base["fraction"], base["accuracy"])},
            "patterns_selected_per_fold": {_fold_key(k): len(v) for k, v in
                                           sorted(self.selected_patterns.items())},
            "runtime_seconds": round(float(self.runtime_seconds), 1),
        }

    def save(self, folder):
        """Write ``early_prediction.csv``, ``early_prediction_long.csv``,
        ``validation_predictions.csv`` and ``validation_folds.json`` to ``folder``."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        write_csv(self.metrics, folder / "early_prediction.csv")
        write_csv(self.to_long(), folder / "early_prediction_long.csv")
        write_csv(self.predictions, folder / "validation_predictions.csv")
        digest = self.summary()
        info = {
            "settings": self.settings,
            "group_names": self.group_names,
            "earliest_fraction": digest["earliest_fraction"],
            "earliest_fraction_sustained": digest["earliest_fraction_sustained"],
            "folds": [
                {"repeat": int(r), "fold": int(k),
                 "held_out": self.folds.loc[(self.folds["repeat"] == r)
                                            & (self.folds["fold"] == k), "learner"].tolist(),
                 "selected_patterns": list(self.selected_patterns[(r, k)]),
                 "encoding": self.encodings[(r, k)]}
                for r, k in sorted(self.selected_patterns)
            ],
        }
        write_json(folder / "validation_folds.json", info, indent=1)
        return folder


def learner_splits(learners, labels=None, *, n_splits=_DEFAULTS["n_splits"], loo=False,
                   random_state=_SEED):
    """Split samples into folds so that no learner spans two folds, as :func:`validate`
    does (stratified by ``labels`` when given).

    Parameters
    ----------
    learners : array-like of str, shape (n_samples,)
        Learner of each sample; a learner may have several samples (sessions).
    labels : array-like, shape (n_samples,), optional
        Group of each sample, used to stratify (the first sample of a learner gives the
        learner's label).
    n_splits : int, default 5
        Number of folds over learners (ignored when ``loo``).
    loo : bool, default False
        One fold per learner.
    random_state : int, default 20261202
        Shuffles learners before the split.

    Returns
    -------
    list of (ndarray, ndarray)
        ``(train_indices, test_indices)`` into the samples, one pair per fold.

    Examples
    --------
    >>> learners = ["a", "a", "b", "c", "d", "e", "f"]
    >>> labels = ["x", "x", "x", "x", "y", "y", "y"]
    >>> for tr, te in learner_splits(learners, labels, n_splits=3, random_state=0):
    ...     print(" ".join(sorted(set(np.asarray(learners)[te]))))
    c e
    b f
    a d
    """
    return _learner_splits(learners, labels, n_splits=n_splits, loo=loo,
                           random_state=random_state)


def default_featurizers(*, random_state=_SEED, pattern_params=None, hmm_params=None):
    """The three featurizers compared by :func:`validate`, unfitted.

    Returns
    -------
    dict
        ``"pattern"``: :class:`PatternFeaturizer`, ``"hmm"``:
        :class:`HMMLikelihoodFeaturizer`, ``"frequency_pause"``:
        :class:`FrequencyPauseFeaturizer`.
    """
    return {
        "pattern": PatternFeaturizer(random_state=random_state, **(pattern_params or {})),
        "hmm": HMMLikelihoodFeaturizer(random_state=random_state, **(hmm_params or {})),
        "frequency_pause": FrequencyPauseFeaturizer(),
    }


def make_classifier(name, *, featurizers=None, C=1.0, random_state=_SEED):
    """A scikit-learn Pipeline equivalent to one classifier of :func:`validate`.

    Features of the named featurizers are stacked (:class:`FeatureUnion`),
    standardised and fed to an L2-regularised logistic regression; ``"majority"``
    is a :class:`~sklearn.dummy.DummyClassifier` (``most_frequent``). ``X`` is a
    SequenceDB and ``y`` the group of each sequence.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a", "a"], ["a", "a", "b"], ["b", "b"], ["b", "b", "a"]])
    >>> clf = make_classifier("frequency_pause").fit(db, ["x", "x", "y", "y"])
    >>> clf.predict(db).tolist()
    ['x', 'x', 'y', 'y']
    """
    if name not in CLASSIFIERS:
        raise ParameterError(f"Unknown classifier {name!r}; choose from {', '.join(CLASSIFIERS)}.")
    if name == "majority":
        return DummyClassifier(strategy="most_frequent")
    feats = (featurizers if featurizers is not None
             else default_featurizers(random_state=random_state))
    union = FeatureUnion([(f, clone(feats[f])) for f in CLASSIFIERS[name]])
    return make_pipeline(union, StandardScaler(), _logistic(C))


# --------------------------------------------------------------------- private
class _FoldRunner:
    """Runs one fold: fit every learned step on training learners, predict held-out.

    ``groups`` maps each learner to its group, fixed once for all folds; a job is
    ``(repeat, fold, training learners, held-out learners, classifiers)``.
    """

    def __init__(self, *, events, groups, group_names, encoder, featurizers, fractions, C,
                 train_on="full"):
        self.events = events
        self.groups = groups
        self.group_names = list(group_names)
        self.encoder = encoder
        self.featurizers = featurizers
        self.fractions = fractions
        self.C = C
        self.train_on = train_on

    def __call__(self, job):
        # The models of a fold are small (hundreds of learners, tens of features): a
        # multi-threaded BLAS only adds hand-over costs there, which grow with the load
        # of the machine (measured: a logistic-regression fit 20x slower on a busy
        # 2-core machine). threadpoolctl ships with scikit-learn.
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=1, user_api="blas"):
            return self._run(job)

    def _run(self, job):
        repeat, fold, tr_l, te_l, classifiers = job
        names = self.group_names
        learner = self.events["learner"]
        ev_tr = self.events[learner.isin(set(tr_l))]
        ev_te = self.events[learner.isin(set(te_l))]
        groups = pd.Series(self.groups, dtype=object)
        encoder = _fresh(self.encoder).fit(ev_tr)
        db_tr = _with_learner_groups(encoder.transform(ev_tr), groups, names)
        db_te = _with_learner_groups(encoder.transform(ev_te), groups, names)
        db_tr = db_tr.subset(db_tr.groups >= 0)
        db_te = db_te.subset(db_te.groups >= 0)
        present = np.unique(db_tr.groups)
        if len(present) < len(names):
            only = ", ".join(repr(names[i]) for i in present) or "none"
            raise ParameterError(
                f"Fold {fold}: the training learners hold only group(s) {only}; use fewer "
                f"folds or check the outcomes.")
        y_tr = db_tr.groups
        needed = sorted({f for c in classifiers for f in CLASSIFIERS[c]})
        fitted = {}
        blocks = {}
        for fname in needed:
            fitted[fname] = clone(self.featurizers[fname]).fit(db_tr, y_tr)
            blocks[fname] = np.asarray(fitted[fname].transform(db_tr), dtype=float)
        full_models = models = self._fit_models(blocks, y_tr, classifiers)
        rows = []
        learners_te = db_te.learners
        uniq, inv = np.unique(learners_te, return_inverse=True)
        true = np.full(len(uniq), -1, dtype=np.int64)
        true[inv] = db_te.groups
        n_seq = np.bincount(inv, minlength=len(uniq)).astype(float)
        for frac in self.fractions:
            cut = db_te if frac >= 1 else db_te.cut(frac)
            te_blocks = {f: np.asarray(m.transform(cut), dtype=float) for f, m in fitted.items()}
            models = full_models
            if self.train_on == "matched" and frac < 1:
                cut_tr = db_tr.cut(frac)
                models = self._fit_models(
                    {f: np.asarray(m.transform(cut_tr), dtype=float)
                     for f, m in fitted.items()}, y_tr, classifiers)
            for cname in classifiers:
                if cname == "majority":
                    X = np.zeros((cut.n_sequences, 1))
                else:
                    X = np.hstack([te_blocks[f] for f in CLASSIFIERS[cname]])
                proba = _full_proba(models[cname], X, len(names))
                per = np.zeros((len(uniq), len(names)))
                np.add.at(per, inv, proba)
                per /= n_seq[:, None]
                pred = np.argmax(per, axis=1)
                frame = {"repeat": repeat, "fold": fold, "learner": uniq,
                         "group": [names[i] for i in true], "classifier": cname,
                         "fraction": float(frac), "predicted": [names[i] for i in pred]}
                for gi, g in enumerate(names):
                    frame[f"proba_{g}"] = per[:, gi]
                rows.append(pd.DataFrame(frame))
        selected = []
        if "pattern" in fitted and hasattr(fitted["pattern"], "get_feature_names_out"):
            selected = [n.removeprefix("pattern: ") for n in
                        fitted["pattern"].get_feature_names_out() if n != "no_pattern"]
        return {
            "repeat": repeat, "fold": fold, "predictions": pd.concat(rows, ignore_index=True),
            "selected_patterns": selected,
            "encoding": copy.deepcopy(getattr(encoder, "encoding_", {})),
        }

    def _fit_models(self, blocks, y_tr, classifiers):
        models = {}
        for cname in classifiers:
            if cname == "majority":
                models[cname] = DummyClassifier(strategy="most_frequent").fit(
                    np.zeros((len(y_tr), 1)), y_tr)
            else:
                X = np.hstack([blocks[f] for f in CLASSIFIERS[cname]])
                models[cname] = make_pipeline(StandardScaler(), _logistic(self.C)).fit(X, y_tr)
        return models


def _full_proba(model, X, k):
    proba = model.predict_proba(X)
    out = np.zeros((X.shape[0], k))
    out[:, np.asarray(model.classes_, dtype=np.int64)] = proba
    return out


def _logistic(C):
    return LogisticRegression(C=C, max_iter=2000)


def _check_fractions(fractions):
    try:
        vals = [fractions] if np.isscalar(fractions) else list(fractions)
    except TypeError:
        raise ParameterError(f"fractions must be a list of numbers in (0, 1]; got "
                             f"{fractions!r}.") from None
    if not vals:
        raise ParameterError("fractions is empty; give at least one fraction in (0, 1], e.g. "
                             "0.25,0.5,1.")
    out = []
    for v in vals:
        try:
            f = float(v)
        except (TypeError, ValueError):
            f = float("nan")
        if not (0 < f <= 1):
            raise ParameterError(
                f"Cut fraction {v!r} is outside (0, 1]; fractions are shares of each "
                f"sequence's events, e.g. 0.1,0.25,0.5,1.")
        out.append(f)
    return sorted(set(out))


def _group_series(result, outcomes):
    """Grouping output as a learner -> group (str or NaN) Series."""
    learners = outcomes["learner"].astype(str).to_numpy()
    if isinstance(result, pd.Series) and not result.index.equals(outcomes.index):
        s = result.copy()  # already indexed by learner
    else:
        s = pd.Series(np.asarray(result, dtype=object), index=learners)
    s.index = s.index.astype(str)
    return s


def _with_learner_groups(db, groups, names):
    pos = {g: i for i, g in enumerate(names)}
    codes = np.array([pos.get(str(groups.get(lr)), -1) if not pd.isna(groups.get(lr, np.nan))
                      else -1 for lr in db.learners], dtype=np.int64)
    return db.with_groups(codes, names)


def _repeat_seed(seed, repeat):
    """Seed of the fold shuffle of repetition ``repeat`` (``seed`` itself for the first)."""
    if repeat == 0:
        return int(seed)
    return int(np.random.SeedSequence([int(seed), int(repeat)]).generate_state(1)[0])


def _fold_key(key):
    return f"{key[0]}/{key[1]}" if isinstance(key, tuple) else str(key)


def _grouping_record(grouping):
    """The grouping rule and cut points as plain JSON values."""
    out = {}
    rule = getattr(grouping, "rule", None)
    if rule is not None:
        out["rule"] = str(rule)
    for k, v in (getattr(grouping, "thresholds_", None) or {}).items():
        out[str(k)] = float(v)
    return out


def _fresh(est):
    try:
        return clone(est)
    except TypeError:
        return copy.deepcopy(est)


def _default_grouping():
    from ..inputs.outcomes import Grouping  # noqa: PLC0415 (stage written separately)

    return Grouping()


def _default_encoder():
    from ..encoding.encoder import Encoder  # noqa: PLC0415

    return Encoder()
