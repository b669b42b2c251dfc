"""``seqmine demo``: the whole pipeline on the shipped virtual-greenhouse data set."""

from __future__ import annotations

import tempfile
from pathlib import Path

from ...config import default_config
from ._options import add_option, print_warnings

NAME = "demo"
HELP = "run the whole pipeline on the shipped greenhouse demo data"
DESCRIPTION = ("Runs 'seqmine analyze' on the synthetic virtual-greenhouse data set "
               "(datasets/greenhouse: 300 invented learners with planted productive, "
               "unproductive and neutral behaviours) and prints where the report is. "
               "When the package is installed without the repository, the same data set is "
               "regenerated from its seed.")

#: The shipped data set, present in a source checkout.
SHIPPED = Path(__file__).resolve().parents[2] / "datasets" / "greenhouse"


def add_arguments(p):
    p.add_argument("--out", default="seqmine-demo", metavar="DIR",
                   help="output folder (default: ./seqmine-demo)")
    add_option(p, None, "n_jobs", type=int, metavar="N",
               help="parallel processes, -1 = all cores (default: {default})")


def run(args):
    from ...demo_data import EVENTS_FILE, OUTCOMES_FILE, write_greenhouse
    from ...pipeline import analyze
    cfg = default_config()
    cfg["n_jobs"] = args.jobs
    if (SHIPPED / EVENTS_FILE).is_file() and (SHIPPED / OUTCOMES_FILE).is_file():
        result = analyze(SHIPPED / EVENTS_FILE, SHIPPED / OUTCOMES_FILE, args.out, cfg,
                         quiet=args.quiet)
    else:
        with tempfile.TemporaryDirectory() as tmp:
            paths = write_greenhouse(tmp)
            result = analyze(paths["events"], paths["outcomes"], args.out, cfg, quiet=args.quiet)
    if not args.quiet:
        print(result.message())
    print_warnings(result.warnings)
    return 0
