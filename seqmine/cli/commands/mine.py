"""``seqmine mine``: frequent ordered patterns of an encoded sequence database."""

from __future__ import annotations

import sys
from pathlib import Path

from ..._util.progress import is_quiet
from ...errors import ParameterError
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
    parser.add_argument("--out", default=None, metavar="PATH",
                        help="output folder, or the path of the pattern table (*.csv); "
                             "default with an output folder as SEQUENCES_DIR: its patternset/")
    _options.add_mining_options(parser)


def run(args):
    """Run the command; returns the exit status."""
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import mine, note_sequence_support, save_patternset
    from ...pipeline import target_run_folder

    params = _options.mining_params(args)
    folder = target_run_folder(args.sequences, args.out)
    if folder is not None:
        return _run_in_folder(args, folder, params)
    if args.out is None:
        raise ParameterError("--out PATH is needed unless SEQUENCES_DIR is an output folder of "
                             "'seqmine encode' or 'seqmine analyze'.")
    db = SequenceDB.load(args.sequences)
    ps = mine(db, **params)
    note_sequence_support(db, params["min_support"], params["support_unit"])
    out = Path(args.out)
    if out.suffix.lower() == ".csv":
        from ..._util.outdir import writing_files
        names = [out.name, "counts.npz", "patternset.json"]
        with writing_files(out.parent, names, "--out", inputs=[args.sequences]) as tmp:
            save_patternset(ps, tmp, table_name=out.name)
        table = out
    else:
        from ..._util.outdir import writing_folder
        with writing_folder(out, "--out", inputs=[args.sequences]) as st:
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
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import mine, note_sequence_support, save_patternset
    from ...pipeline import mine_summary, own_stage_folder, rerun_stage
    db_dir = own_stage_folder(folder, "encode", args.sequences)
    name = "patternset"
    if args.out and Path(args.out).resolve() != folder.resolve():
        rel = Path(args.out).resolve().relative_to(folder.resolve())
        if len(rel.parts) != 1 or rel.suffix:
            raise ParameterError(f"--out {args.out}: inside an output folder the pattern set "
                                 f"is a folder directly in {folder}, such as "
                                 f"{folder / 'patternset'}.")
        name = rel.name
    settings = dict(params)

    def work(st):
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        ps = mine(db, **params)
        note_sequence_support(db, params["min_support"], params["support_unit"])
        save_patternset(ps, st.path / name)
        return mine_summary(ps, params), (ps, db)

    (ps, db), target, _ = rerun_stage(folder, "mine", NAME, work, settings=settings,
                                      config_section="mine", config_values=settings)
    _say(ps, db, target / name / "patterns.csv")
    return 0
