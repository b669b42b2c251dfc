"""``seqmine phases``: hidden Markov models of phases of work, per outcome group."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from ...config import DEFAULT_CONFIG
from ...encoding.sequences import SequenceDB

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
    """Options of ``seqmine phases`` (defaults from ``DEFAULT_CONFIG["phases"]``)."""
    d = DEFAULT_CONFIG["phases"]
    states = f"{d['min_states']}-{d['max_states']}"
    parser.add_argument("seqdb", metavar="SEQDB_DIR",
                        help="sequence database folder written by 'seqmine encode'")
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="output folder; results go to DIR/phases/")
    parser.add_argument("--states", default=states, metavar="RANGE",
                        help=f"state counts to try: '3', '2-6' or '2,3,5' (default {states})")
    parser.add_argument("--restarts", type=int, default=d["restarts"], metavar="N",
                        help=f"Baum-Welch starts per fit (default {d['restarts']})")
    parser.add_argument("--max-iter", type=int, default=d["max_iter"], metavar="N",
                        help=f"most EM steps per fit (default {d['max_iter']})")
    parser.add_argument("--tol", type=float, default=d["tol"], metavar="X",
                        help="EM stops when a step gains less than X in total "
                             f"log-likelihood (default {d['tol']})")
    parser.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default 0)")
    parser.add_argument("--jobs", type=int, default=1, metavar="N",
                        help="parallel workers; results equal the serial run (default 1)")
    parser.add_argument("--criterion", choices=("bic", "heldout"), default=d["criterion"],
                        help=f"how the state count is chosen (default {d['criterion']})")
    parser.add_argument("--folds", type=int, default=d["heldout_folds"], metavar="K",
                        help="learner folds for the held-out log-likelihood: one fold "
                             "(1/K of the learners) is held out; 0 = off "
                             f"(default {d['heldout_folds']})")
    parser.add_argument("--all-folds", action="store_true",
                        help="hold out every fold in turn (K fits per state count)")
    parser.add_argument("--permutations", type=int, default=d["permutations"], metavar="N",
                        help="label permutations for the model-distance reference; each "
                             f"costs two fits (default {d['permutations']})")


def run(args):
    """Run ``seqmine phases``; quiet mode is set per call by the command line."""
    from ...phases import fit_phases

    db = SequenceDB.load(args.seqdb)
    result = fit_phases(db, n_states=args.states, n_restarts=args.restarts, seed=args.seed,
                        n_jobs=args.jobs, criterion=args.criterion, n_folds=args.folds,
                        all_folds=args.all_folds, max_iter=args.max_iter, tol=args.tol,
                        n_permutations=args.permutations)
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
