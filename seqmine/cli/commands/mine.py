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
    parser.add_argument("--out", default=None, metavar="PATH",
                        help="output folder, or the path of the pattern table (*.csv); "
                             "default with an output folder as SEQDB_DIR: its patternset/")
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
    from ...pipeline import run_folder_of

    params = dict(min_support=_support(args.min_support), min_length=args.min_length,
                  max_length=args.max_length, max_gap=args.max_gap, max_window=args.max_window,
                  skip_pauses=args.skip_pauses, start_with_action=args.start_with_action,
                  end_with_action=args.end_with_action, closed=args.closed, maximal=args.maximal,
                  max_patterns=(DEFAULT_MAX_PATTERNS if args.max_patterns is None
                                else args.max_patterns))
    given = Path(args.seqdb)
    folder = (run_folder_of(given) if (given / "summary.json").is_file()
              and run_folder_of(given) == given.absolute() else None)
    if folder is None and args.out is not None:
        folder = run_folder_of(args.out)
    if folder is not None:
        return _run_in_folder(args, folder, params)
    if args.out is None:
        raise ParameterError("--out PATH is needed unless SEQDB_DIR is an output folder of "
                             "'seqmine encode' or 'seqmine analyze'.")
    db = SequenceDB.load(args.seqdb)
    ps = mine(db, **params)
    out = Path(args.out)
    if out.suffix.lower() == ".csv":
        from ..._util.outdir import writing_files
        names = [out.name, "counts.npz", "patternset.json"]
        with writing_files(out.parent, names, "--out", inputs=[args.seqdb]) as tmp:
            save_patternset(ps, tmp, table_name=out.name)
        table = out
    else:
        from ..._util.outdir import writing_folder
        with writing_folder(out, "--out", inputs=[args.seqdb]) as st:
            save_patternset(ps, st.path)
        table = out / "patterns.csv"
    _say(ps, db, table)
    return 0


def _say(ps, db, table):
    if not is_quiet():
        print(f"mine: {ps.n_patterns} patterns from {db.n_sequences} sequences "
              f"(groups: {', '.join(ps.group_names)})", file=sys.stderr)
    print(f"pattern table written to {table}")


def _run_in_folder(args, folder, params):
    """Re-run the mining stage of an output folder (its later stages are removed)."""
    from ...mining.miner import mine, save_patternset
    from ...pipeline import mine_summary, own_stage_folder, rerun_stage
    db_dir = own_stage_folder(folder, "encode", args.seqdb)
    name = "patternset"
    if args.out and Path(args.out).resolve() != folder.resolve():
        rel = Path(args.out).resolve().relative_to(folder.resolve())
        if len(rel.parts) != 1 or rel.suffix:
            raise ParameterError(f"--out {args.out}: inside an output folder the pattern set "
                                 f"is a folder directly in {folder}, such as "
                                 f"{folder / 'patternset'}.")
        name = rel.name
    settings = dict(params)

    from ...encoding.sequences import SequenceDB

    def work(st):
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        ps = mine(db, **params)
        save_patternset(ps, st.path / name)
        return mine_summary(ps, params), (ps, db)

    (ps, db), target, _ = rerun_stage(folder, "mine", NAME, work, settings=settings,
                                   config_section="mine", config_values=settings)
    _say(ps, db, target / name / "patterns.csv")
    return 0
