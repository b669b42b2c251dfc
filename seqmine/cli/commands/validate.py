"""``seqmine validate``: learner-level cross-validation and the early-prediction curve."""

from __future__ import annotations

from pathlib import Path

from ...config import CLASSIFIERS, DEFAULT_FRACTIONS
from ...errors import ParameterError
from . import _options

NAME = "validate"
HELP = "cross-validate the discovery pipeline by learner and measure early prediction"
DESCRIPTION = (
    "Split learners into folds (stratified k-fold or leave-one-learner-out). In each fold "
    "the grouping thresholds, pause bins, mined patterns, selected contrasting patterns "
    "and group HMMs are learned on the training learners only, then the held-out "
    "learners' sequences are cut to their first 10%, 20%, ... of events and classified. "
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
    from ..._util.outdir import writing_folder
    from ..._util.parallel import effective_jobs
    from ...inputs.sources import regular_input
    from ...pipeline import recorded_names, run_folder_of
    from ...validation.crossval import default_featurizers, validate

    fractions = _options.parse_float_list(args.fractions, "--fractions")
    if not fractions:
        raise ParameterError("--fractions needs at least one number in (0, 1], e.g. 0.25,0.5,1.")
    classifiers = [c.strip() for c in args.classifiers.split(",") if c.strip()]
    for c in classifiers:
        if c not in CLASSIFIERS:
            raise ParameterError(
                f"--classifiers: unknown name {c!r}; choose from {', '.join(CLASSIFIERS)}.")
    jobs = effective_jobs(args.jobs, notify=not args.quiet) if args.scheduler in (
        None, "local") else args.jobs
    out = Path(args.out)
    folder = run_folder_of(out) if run_folder_of(out) == out.absolute() else None
    with regular_input(args.events, "events",
                       max_bytes=_options.check_max_bytes(args.max_bytes)) as ev, \
            regular_input(args.outcomes, "outcomes") as oc:
        if folder is not None:
            _check_same_inputs(args, folder, ev, oc)
        loaded, outcomes = _options.pseudonymize_inputs(
            args, _options.events_from_args(args, ev[0]), _options.outcomes_from_args(args, oc[0]))
    featurizers = default_featurizers(
        seed=args.seed,
        pattern_params=dict(min_support=args.min_support, max_length=args.max_length,
                            max_gap=None if args.max_gap < 0 else args.max_gap,
                            top_k=args.top_k, alpha=args.alpha),
        hmm_params=dict(n_states=args.hmm_states))
    result = validate(
        loaded.events, outcomes, folds=args.folds, loo=args.loo, fractions=fractions,
        grouping=_options.grouping_from_args(args, outcomes),
        encoder=_options.encoder_from_args(args), featurizers=featurizers,
        classifiers=classifiers, train_on=args.train_on, n_bootstrap=args.bootstrap,
        alpha=args.alpha,
        seed=args.seed, n_jobs=jobs, scheduler=args.scheduler)
    if folder is not None:
        _save_in_folder(args, folder, result, loaded)
    else:
        with writing_folder(out, "--out", inputs=[args.events, args.outcomes],
                            owned=recorded_names(out)) as st:
            result.save(st.path)
    if not args.quiet:
        earliest = result.earliest_fraction()
        parts = [f"{k} {'never' if v != v else f'{v:g}'}" for k, v in earliest.items()]
        print(f"validated {result.settings['n_learners']} learners in "
              f"{'leave-one-out' if args.loo else f'{args.folds} folds'} "
              f"({result.runtime_seconds:.1f} s); earliest fraction beating the majority "
              f"baseline: {', '.join(parts)} -> {out / 'early_prediction.csv'}")
    return 0


def _check_same_inputs(args, folder, ev, oc):
    """Validation written into an output folder must use the run's own data and key."""
    from ..._util.runrecord import file_input, read_summary
    from ...errors import OutputError
    from ...inputs.privacy import key_fingerprint, read_key
    load = ((read_summary(folder) or {}).get("stages") or {}).get("load") or {}
    recorded = load.get("inputs") or {}
    for role, pair, given in (("events", ev, args.events), ("outcomes", oc, args.outcomes)):
        want = (recorded.get(role) or {}).get("sha256")
        if want and file_input(pair[0])["sha256"] != want:
            raise OutputError(f"{given}: not the {role} file the run in {folder} was made from "
                              f"(its content differs from the record); validate into another "
                              f"folder, or re-run 'seqmine analyze'.")
    privacy = (load.get("settings") or {}).get("privacy") or {}
    key = read_key(args.pseudonymize) if args.pseudonymize else None
    if privacy.get("pseudonymized") and key is None:
        raise OutputError(f"{folder}: the run there is pseudonymized; give the same "
                          f"--pseudonymize KEY_FILE, so no raw identifier enters the folder.")
    if key is not None and privacy.get("key_fingerprint") not in (None, key_fingerprint(key)):
        raise OutputError(f"{args.pseudonymize}: not the key the run in {folder} was "
                          f"pseudonymized with; give that key (pseudonyms would not match).")
    if key is not None and not privacy.get("pseudonymized"):
        raise OutputError(f"{folder}: the run there is not pseudonymized; validate into "
                          f"another folder or re-run 'seqmine analyze --pseudonymize'.")


def _save_in_folder(args, folder, result, loaded):
    from ...pipeline import rerun_stage, validation_summary
    settings = {"folds": args.folds, "loo": args.loo, "fractions": args.fractions,
                "classifiers": args.classifiers, "train_on": args.train_on, "seed": args.seed,
                "bootstrap": args.bootstrap, "min_support": args.min_support,
                "max_length": args.max_length, "max_gap": args.max_gap, "top_k": args.top_k,
                "alpha": args.alpha, "hmm_states": args.hmm_states}

    def work(st):
        result.save(st.path)
        return validation_summary(result, {"folds": args.folds},
                                  int(loaded.events["learner"].nunique())), None

    rerun_stage(folder, "validate", NAME, work, settings=settings,
                inputs={"load": {"stage": "load"}},
                outside_inputs=[args.events, args.outcomes], config_section="validate",
                config_values={"folds": args.folds, "bootstrap": args.bootstrap})
