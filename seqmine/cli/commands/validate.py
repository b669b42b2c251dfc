"""``seqmine validate``: learner-level cross-validation and the early-prediction curve."""

from __future__ import annotations

from pathlib import Path

from ...config import CLASSIFIERS, DEFAULT_CONFIG
from ...errors import ParameterError
from . import _options
from ._options import add_option

#: States of each group HMM of the hmm classifier (HMMLikelihoodFeaturizer's default;
#: tests/test_defaults.py checks that they agree).
_HMM_STATES = 3

NAME = "validate"
HELP = "cross-validate the discovery pipeline by learner and measure early prediction"
DESCRIPTION = (
    "Split learners into folds (stratified k-fold, repeated with fresh shuffles, or "
    "leave-one-learner-out). The outcome groups are decided once from the outcome table "
    "and kept in every fold. In each fold the pause bins, mined patterns, selected "
    "contrasting patterns and group HMMs are learned on the training learners only, then "
    "the held-out learners' sequences are cut to their first 10%, 20%, ... of events and "
    "classified; metrics are averaged over the repetitions, with their range. "
    "Writes OUT/early_prediction.csv (accuracy, balanced accuracy, per-group recall, ROC "
    "AUC with bootstrap intervals, the majority baseline and whether each classifier "
    "beats it), OUT/early_prediction_long.csv (plot-ready), "
    "OUT/validation_predictions.csv and OUT/validation_folds.json. Results are "
    "correlational; pilot any detector with educators before it drives hints.")


def add_arguments(p):
    p.add_argument("events", metavar="EVENTS", help="event log (CSV, TSV, Parquet, JSONL or xAPI JSON)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    split = p.add_mutually_exclusive_group()
    add_option(split, "validate", "n_splits", type=int, metavar="K",
               help="stratified folds over learners (default: {default})")
    split.add_argument("--loo", action="store_true", help="leave one learner out instead")
    add_option(p, "validate", "n_repeats", type=int, metavar="R",
               help="repeat the k-fold split R times with fresh shuffles (default: {default})")
    add_option(p, "validate", "n_repeats_hmm", type=int, metavar="R",
               help="repetitions of the classifiers using group HMMs (hmm, fusion), which "
                    "cost most (default: {default})")
    add_option(p, "validate", "fractions", type=_options.float_list, metavar="F1,F2,...",
               default=_options.shown(DEFAULT_CONFIG["validate"]["fractions"]),
               help="observed shares of each held-out sequence, in (0, 1] (default: {default})")
    p.add_argument("--classifiers", default=",".join(CLASSIFIERS), metavar="NAMES",
                   help="classifiers to compare (default: %(default)s)")
    p.add_argument("--train-on", choices=["full", "matched"], default="full",
                   help="train the classifiers on full training sequences (default) or, for "
                        "each fraction, on training sequences cut to the same fraction")
    _options.add_execution_options(p)
    add_option(p, "validate", "n_bootstrap", type=int, metavar="B",
               help="bootstrap resamples of held-out learners (default: {default})")
    g = _options.add_mining_options(p, title="pattern selection (inside each training fold)")
    add_option(g, "validate", "top_k", type=int, metavar="K",
               help="at most this many selected patterns (default: {default})")
    add_option(g, "contrast", "alpha", type=float, metavar="A",
               help="q-value cut for selection and level of the baseline test "
                    "(default: {default})")
    g.add_argument("--hmm-states", type=int, default=_HMM_STATES, metavar="N",
                   help="states of each group HMM (default: %(default)s)")
    _options.add_event_options(p)
    _options.add_outcome_options(p)
    _options.add_encoding_options(p)
    _options.add_privacy_option(p)


def run(args):
    from ...validation.crossval import default_featurizers, validate
    fractions = args.fractions
    if not fractions:
        raise ParameterError("--fractions needs at least one number in (0, 1], e.g. 0.25,0.5,1.")
    classifiers = [c.strip() for c in args.classifiers.split(",") if c.strip()]
    for c in classifiers:
        if c not in CLASSIFIERS:
            raise ParameterError(
                f"--classifiers: unknown name {c!r}; choose from {', '.join(CLASSIFIERS)}.")
    loaded, outcomes = _options.pseudonymize_inputs(
        args, _options.events_from_args(args, args.events), _options.outcomes_from_args(args))
    featurizers = default_featurizers(
        random_state=args.seed,
        pattern_params=dict(_options.mining_params(args), top_k=args.top_k, alpha=args.alpha),
        hmm_params=dict(n_states=args.hmm_states))
    result = validate(
        loaded.events, outcomes, n_splits=args.splits, n_repeats=args.repeats,
        n_repeats_hmm=args.repeats_hmm, loo=args.loo, fractions=fractions,
        grouping=_options.grouping_from_args(args, outcomes),
        encoder=_options.encoder_from_args(args), featurizers=featurizers,
        classifiers=classifiers, train_on=args.train_on, n_bootstrap=args.bootstrap,
        alpha=args.alpha, random_state=args.seed, n_jobs=args.jobs, scheduler=args.scheduler)
    out = result.save(Path(args.out))
    if not args.quiet:
        earliest = result.earliest_fraction()
        parts = [f"{k} {'never' if v != v else f'{v:g}'}" for k, v in earliest.items()]
        how = ("leave-one-out" if args.loo else
               f"{args.splits} folds x {result.settings['n_repeats']} repetitions")
        print(f"validated {result.settings['n_learners']} learners in {how} "
              f"({result.runtime_seconds:.1f} s); earliest fraction beating the majority "
              f"baseline: {', '.join(parts)} -> {out / 'early_prediction.csv'}")
    return 0
