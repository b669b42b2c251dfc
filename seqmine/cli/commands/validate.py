"""``seqmine validate``: learner-level cross-validation and the early-prediction curve."""

from __future__ import annotations

from pathlib import Path

from ...config import CLASSIFIERS, DEFAULT_CONFIG, DEFAULT_FRACTIONS
from ...errors import ParameterError
from . import _options

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
    split.add_argument("--folds", type=int, default=5, metavar="K",
                       help="stratified folds over learners (default: 5)")
    split.add_argument("--loo", action="store_true", help="leave one learner out instead")
    p.add_argument("--repeats", type=int, default=DEFAULT_CONFIG["validate"]["repeats"],
                   metavar="R", help="repeat the k-fold split R times with fresh shuffles "
                                     "(default: %(default)s)")
    p.add_argument("--hmm-repeats", type=int, default=DEFAULT_CONFIG["validate"]["hmm_repeats"],
                   metavar="R", help="repetitions of the classifiers using group HMMs (hmm, "
                                     "fusion), which cost most (default: %(default)s)")
    p.add_argument("--fractions", default=",".join(f"{f:g}" for f in DEFAULT_FRACTIONS),
                   metavar="F1,F2,...",
                   help="observed shares of each held-out sequence, in (0, 1] "
                        "(default: %(default)s)")
    p.add_argument("--classifiers", default=",".join(CLASSIFIERS), metavar="NAMES",
                   help="classifiers to compare (default: %(default)s)")
    p.add_argument("--train-on", choices=["full", "matched"], default="full",
                   help="train the classifiers on full training sequences (default) or, for "
                        "each fraction, on training sequences cut to the same fraction")
    p.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="folds run in parallel on N processes (-1: all cores); same results")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run the folds on this Dask scheduler (e.g. tcp://host:8786, or "
                        "'local' for a local cluster with --jobs workers); same results")
    p.add_argument("--seed", type=int, default=0, help="seed of folds, models and bootstrap")
    p.add_argument("--bootstrap", type=int, default=1000, metavar="B",
                   help="bootstrap resamples of held-out learners (default: 1000)")
    g = p.add_argument_group("pattern selection (inside each training fold)")
    g.add_argument("--min-support", type=float, default=0.1,
                   help="mining threshold: share of a group's sequences (default: 0.1)")
    g.add_argument("--max-length", type=int, default=3, help="longest pattern (default: 3)")
    g.add_argument("--max-gap", type=int, default=0,
                   help="tokens allowed between pattern items (default: 0 = contiguous; "
                        "-1 = any)")
    g.add_argument("--top-k", type=int, default=30,
                   help="at most this many selected patterns (default: 30)")
    g.add_argument("--alpha", type=float, default=0.05,
                   help="q-value cut for selection and level of the baseline test (default: 0.05)")
    g.add_argument("--hmm-states", type=int, default=3, help="states of each group HMM (default: 3)")
    _options.add_event_options(p)
    _options.add_outcome_options(p)
    _options.add_encoding_options(p)
    _options.add_privacy_option(p)


def run(args):
    from ...validation.crossval import default_featurizers, validate
    fractions = _options.parse_float_list(args.fractions, "--fractions")
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
        seed=args.seed,
        pattern_params=dict(min_support=args.min_support, max_length=args.max_length,
                            max_gap=None if args.max_gap < 0 else args.max_gap,
                            top_k=args.top_k, alpha=args.alpha),
        hmm_params=dict(n_states=args.hmm_states))
    result = validate(
        loaded.events, outcomes, folds=args.folds, n_repeats=args.repeats,
        n_repeats_hmm=args.hmm_repeats, loo=args.loo, fractions=fractions,
        grouping=_options.grouping_from_args(args, outcomes),
        encoder=_options.encoder_from_args(args), featurizers=featurizers,
        classifiers=classifiers, train_on=args.train_on, n_bootstrap=args.bootstrap,
        alpha=args.alpha,
        seed=args.seed, n_jobs=args.jobs, scheduler=args.scheduler)
    out = result.save(Path(args.out))
    if not args.quiet:
        earliest = result.earliest_fraction()
        parts = [f"{k} {'never' if v != v else f'{v:g}'}" for k, v in earliest.items()]
        how = ("leave-one-out" if args.loo else
               f"{args.folds} folds x {result.settings['repeats']} repetitions")
        print(f"validated {result.settings['n_learners']} learners in {how} "
              f"({result.runtime_seconds:.1f} s); earliest fraction beating the majority "
              f"baseline: {', '.join(parts)} -> {out / 'early_prediction.csv'}")
    return 0
