"""``seqmine mine``: frequent ordered patterns of an encoded sequence database."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from ...errors import ParameterError

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "mine"
HELP = "mine ordered patterns that are frequent in at least one outcome group"
DESCRIPTION = (
    "Mine ordered patterns (PrefixSpan-style prefix projection) from a sequence database "
    "written by 'seqmine encode'. A pattern is kept when its share of sequences reaches "
    "--min-support in at least one outcome group. Writes the pattern table (patterns.csv) "
    "and the pattern set that later steps read (counts.npz, patternset.json) into the "
    "output folder; if --out ends in .csv, that file is the table and the other files go "
    "beside it."
)


def _support(text):
    """A fraction ('0.1', '1.0') or a count of sequences ('5')."""
    t = str(text).strip()
    try:
        if any(c in t for c in ".eE"):
            return float(t)
        return int(t)
    except ValueError:
        raise ParameterError(
            f"--min-support must be a fraction in (0, 1] such as 0.2 or a count of sequences "
            f"such as 5. Got {text!r} instead.") from None


def _optional_int(text):
    t = str(text).strip().lower()
    if t in ("none", "off", ""):
        return None
    try:
        return int(t)
    except ValueError:
        raise ParameterError(f"Expected a whole number or 'none'. Got {text!r} instead.") \
            from None


def add_arguments(parser):
    """Options of ``seqmine mine``."""
    parser.add_argument("seqdb", metavar="SEQDB_DIR",
                        help="sequence database folder written by 'seqmine encode'")
    parser.add_argument("--out", required=True, metavar="PATH",
                        help="output folder, or the path of the pattern table (*.csv)")
    parser.add_argument("--min-support", default="0.1", metavar="S",
                        help="fraction of a group's sequences (e.g. 0.2) or a count of "
                             "sequences (e.g. 5); default 0.1")
    parser.add_argument("--min-length", type=int, default=1, metavar="N",
                        help="shortest pattern reported (default 1)")
    parser.add_argument("--max-length", type=_optional_int, default=4, metavar="N",
                        help="longest pattern reported, or 'none' (default 4)")
    parser.add_argument("--max-gap", type=_optional_int, default=None, metavar="N",
                        help="most tokens between consecutive items, 0 = contiguous "
                             "(default: unlimited)")
    parser.add_argument("--max-window", type=_optional_int, default=None, metavar="N",
                        help="largest span of an occurrence in tokens (default: unlimited)")
    parser.add_argument("--skip-pauses", action="store_true",
                        help="pause tokens do not count toward gaps and windows")
    parser.add_argument("--start-with-action", action="store_true",
                        help="report only patterns whose first item is an action")
    parser.add_argument("--end-with-action", action="store_true",
                        help="report only patterns whose last item is an action")
    parser.add_argument("--closed", action="store_true",
                        help="drop patterns contained in a longer one with the same "
                             "support in every group")
    parser.add_argument("--maximal", action="store_true",
                        help="drop patterns contained in a longer reported pattern")
    parser.add_argument("--max-patterns", type=int, default=None, metavar="N",
                        help="stop when more frequent patterns than N are found "
                             "(default 200000)")


def run(args):
    """Run the command; returns the exit status."""
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import DEFAULT_MAX_PATTERNS, mine, save_patternset
    db = SequenceDB.load(args.seqdb)
    ps = mine(db, min_support=_support(args.min_support), min_length=args.min_length,
              max_length=args.max_length, max_gap=args.max_gap, max_window=args.max_window,
              skip_pauses=args.skip_pauses, start_with_action=args.start_with_action,
              end_with_action=args.end_with_action, closed=args.closed, maximal=args.maximal,
              max_patterns=(DEFAULT_MAX_PATTERNS if args.max_patterns is None
                            else args.max_patterns))
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
