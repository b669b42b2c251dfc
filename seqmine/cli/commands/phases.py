"""``seqmine phases``: hidden Markov models of phases of work, per outcome group."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from ...config import DEFAULT_CONFIG
from ...errors import ParameterError
from . import _options
from ._options import add_option

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "phases"
HELP = "fit hidden Markov models of phases of work per outcome group and compare them"
DESCRIPTION = (
    "Fit categorical hidden Markov models to the encoded sequences, pooled and per outcome "
    "group; choose the number of states by BIC (or held-out log-likelihood); compare the "
    "groups' decoded state paths, aligned transition matrices and model distance. Writes "
    "OUT/phases/ (models as JSON, GraphML graphs, CSV tables, state sequences)."
)


def add_arguments(parser):
    """Options of ``seqmine phases`` (defaults: the ``[phases]`` configuration section)."""
    _options.add_sequences_option(parser)
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="output folder; results go to DIR/phases/ (default with an "
                             "output folder as SEQUENCES_DIR: that folder)")
    ph = DEFAULT_CONFIG["phases"]
    parser.add_argument("--states", default=f"{ph['min_states']}-{ph['max_states']}",
                        metavar="RANGE",
                        help="state counts to try: '3', '2-6' or '2,3,5' (default: %(default)s)")
    add_option(parser, "phases", "n_restarts", type=int, metavar="N",
               help="Baum-Welch restarts per fit (default: {default})")
    _options.add_execution_options(parser, scheduler=False)
    add_option(parser, "phases", "criterion", choices=("bic", "heldout"),
               help="how the state count is chosen (default: {default})")
    add_option(parser, "phases", "n_splits", type=int, metavar="K",
               help="learner folds for the held-out log-likelihood; 0 = off (default: {default})")
    add_option(parser, "phases", "n_permutations", type=int, metavar="N",
               help="label permutations for the model-distance reference (default: {default})")


def run(args):
    """Run ``seqmine phases``; quiet mode is set per call by the command line."""
    from ..._util.outdir import writing_folder
    from ..._util.parallel import effective_jobs
    from ...encoding.sequences import SequenceDB
    from ...pipeline import target_run_folder

    jobs = effective_jobs(args.jobs, notify=True)
    folder = target_run_folder(args.sequences, args.out, out_is_folder=True)
    if folder is not None:
        return _run_in_folder(args, folder, jobs)
    if args.out is None:
        raise ParameterError("--out DIR is needed unless SEQUENCES_DIR is an output folder of "
                             "'seqmine encode' or 'seqmine analyze'.")
    db = SequenceDB.load(args.sequences)
    result = _fit(db, args, jobs)
    with writing_folder(Path(args.out) / "phases", "--out", inputs=[args.sequences]) as st:
        result.save(st.path)
    _say(result, Path(args.out) / "phases")
    return 0


def _fit(db, args, jobs):
    from ...phases import fit_phases
    return fit_phases(db, n_states=args.states, n_restarts=args.restarts,
                      random_state=args.seed, n_jobs=jobs, criterion=args.criterion,
                      n_splits=args.splits, n_permutations=args.permutations)


def _say(result, folder):
    if not is_quiet():
        msg = [f"phases: {result.n_states} states ({result.params['criterion']}), "
               f"{result.state_db.n_sequences} sequences modelled"]
        if result.at_top_of_range:
            msg.append("the chosen count is the largest tried; consider a wider --states range")
        if result.n_excluded:
            msg.append(f"{result.n_excluded} sequences shorter than "
                       f"{result.params['min_length']} tokens left out (see excluded.csv)")
        print("; ".join(msg), file=sys.stderr)
    print(f"phase models written to {folder}")


def _run_in_folder(args, folder, jobs):
    """Re-run the phases stage of an output folder."""
    from ...encoding.sequences import SequenceDB
    from ...pipeline import own_stage_folder, phases_summary, rerun_stage
    db_dir = own_stage_folder(folder, "encode", args.sequences)
    settings = {"states": args.states, "n_restarts": args.restarts, "seed": args.seed,
                "criterion": args.criterion, "n_splits": args.splits,
                "n_permutations": args.permutations}
    counts = [int(x) for x in str(args.states).replace("-", ",").split(",") if x.strip().isdigit()]
    if counts:
        settings.update(min_states=min(counts), max_states=max(counts))

    def work(st):
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        result = _fit(db, args, jobs)
        result.save(st.path / "phases")
        return phases_summary(result, db), result

    result, target, _ = rerun_stage(folder, "phases", NAME, work, settings=settings,
                                 config_section="phases", config_values=settings)
    _say(result, target / "phases")
    return 0
