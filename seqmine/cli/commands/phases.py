"""``seqmine phases``: hidden Markov models of phases of work, per outcome group."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from ...config import DEFAULT_CONFIG
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
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="output folder; results go to DIR/phases/")
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
    from ...encoding.sequences import SequenceDB
    from ...phases import fit_phases

    db = SequenceDB.load(args.sequences)
    result = fit_phases(db, n_states=args.states, n_restarts=args.restarts,
                        random_state=args.seed, n_jobs=args.jobs, criterion=args.criterion,
                        n_splits=args.splits, n_permutations=args.permutations)
    folder = result.save(Path(args.out) / "phases")
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
    return 0
