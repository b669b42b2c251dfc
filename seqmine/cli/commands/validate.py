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
    from ..._util.outdir import writing_folder
    from ..._util.parallel import effective_jobs
    from ...inputs.sources import regular_input
    from ...pipeline import recorded_names, target_run_folder
    from ...validation.crossval import default_featurizers, validate

    fractions = args.fractions
    if not fractions:
        raise ParameterError("--fractions needs at least one number in (0, 1], e.g. 0.25,0.5,1.")
    classifiers = [c.strip() for c in args.classifiers.split(",") if c.strip()]
    for c in classifiers:
        if c not in CLASSIFIERS:
            raise ParameterError(
                f"--classifiers: unknown name {c!r}; choose from {', '.join(CLASSIFIERS)}.")
    jobs = effective_jobs(args.jobs, notify=True) if args.scheduler in (
        None, "local") else args.jobs
    out = Path(args.out)
    folder = target_run_folder(out=out, out_is_folder=True)
    with regular_input(args.events, "events", max_bytes=args.max_bytes) as ev, \
            regular_input(args.outcomes, "outcomes") as oc:
        if folder is not None:
            _check_same_inputs(args, folder, ev, oc)
        loaded, outcomes = _options.pseudonymize_inputs(
            args, _options.events_from_args(args, ev[0]), _options.outcomes_from_args(args, oc[0]))
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
        alpha=args.alpha, random_state=args.seed, n_jobs=jobs, scheduler=args.scheduler)
    if folder is not None:
        _save_in_folder(args, folder, result, loaded)
    else:
        with writing_folder(out, "--out", inputs=[args.events, args.outcomes],
                            owned=recorded_names(out)) as st:
            result.save(st.path)
    if not args.quiet:
        earliest = result.earliest_fraction()
        parts = [f"{k} {'never' if v != v else f'{v:g}'}" for k, v in earliest.items()]
        how = ("leave-one-out" if args.loo else
               f"{args.splits} folds x {result.settings['n_repeats']} repetitions")
        print(f"validated {result.settings['n_learners']} learners in {how} "
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
    settings = {"n_splits": args.splits, "loo": args.loo, "fractions": args.fractions,
                "classifiers": args.classifiers, "train_on": args.train_on, "seed": args.seed,
                "n_bootstrap": args.bootstrap, "top_k": args.top_k, "alpha": args.alpha,
                "hmm_states": args.hmm_states, **_options.mining_params(args)}

    def work(st):
        result.save(st.path)
        return validation_summary(result, {"n_splits": args.splits},
                                  int(loaded.events["learner"].nunique())), None

    rerun_stage(folder, "validate", NAME, work, settings=settings,
                inputs={"load": {"stage": "load"}},
                outside_inputs=[args.events, args.outcomes], config_section="validate",
                config_values={"n_splits": args.splits, "n_bootstrap": args.bootstrap})
