"""``seqmine mine``: frequent ordered patterns of an encoded sequence database."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from . import _options

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "mine"
HELP = "mine ordered patterns that are frequent in at least one outcome group"
DESCRIPTION = (
    "Mine ordered patterns (PrefixSpan-style prefix projection) from a sequence database "
    "written by 'seqmine encode'. A pattern is kept when its share of sequences reaches "
    "--min-support in at least one outcome group; the defaults are those of "
    "'seqmine analyze'. Writes the pattern table (patterns.csv) "
    "and the pattern set that later steps read (counts.npz, patternset.json) into the "
    "output folder; if --out ends in .csv, that file is the table and the other files go "
    "beside it."
)


def add_arguments(parser):
    """Options of ``seqmine mine``."""
    _options.add_sequences_option(parser)
    parser.add_argument("--out", required=True, metavar="PATH",
                        help="output folder, or the path of the pattern table (*.csv)")
    _options.add_mining_options(parser)


def run(args):
    """Run the command; returns the exit status."""
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import mine, save_patternset
    db = SequenceDB.load(args.sequences)
    ps = mine(db, **_options.mining_params(args))
    out = Path(args.out)
    if out.suffix.lower() == ".csv":
        folder = save_patternset(ps, out.parent, table_name=out.name)
        table = out
    else:
        folder = save_patternset(ps, out)
        table = folder / "patterns.csv"
    if not is_quiet():
        print(f"mine: {ps.n_patterns} patterns from {db.n_sequences} sequences "
              f"(groups: {', '.join(ps.group_names)})", file=sys.stderr)
    print(f"pattern table written to {table}")
    return 0
