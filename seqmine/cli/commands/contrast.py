"""``seqmine contrast``: score mined patterns (and lag-1 transitions) between outcome groups."""

from __future__ import annotations

from pathlib import Path

from ..._util.csvio import write_csv
from ..._util.progress import is_quiet
from ...errors import DataFileError, ParameterError
from . import _options
from ._options import OnOffAction, add_option

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run", "read_patternset"]

NAME = "contrast"
HELP = "test which mined patterns separate the outcome groups (patterns.csv, transitions.csv)"
DESCRIPTION = (
    "Read a pattern set written by 'seqmine mine' and score every pattern for how it "
    "separates the outcome groups: per-group support and rate, Fisher's exact test on "
    "presence, the same difference at equal activity volume (Cochran-Mantel-Haenszel "
    "over activity strata) and in the items' order, the evidence each finding rests on, "
    "Mann-Whitney U on rates, effect sizes, multiple-comparison control "
    "(Benjamini-Hochberg, Holm or a Westfall-Young permutation test), bootstrap stability, "
    "split-half replication and redundancy marks. With --transitions (needs --sequences) "
    "also writes the lag-1 transition table with adjusted residuals (description) and a "
    "learner-level test per transition. Findings are correlational."
)


def add_arguments(parser):
    """Options of ``seqmine contrast``."""
    parser.add_argument("patterns", metavar="PATTERNS_DIR",
                        help="pattern set folder written by 'seqmine mine' (or its .csv table)")
    _options.add_sequences_option(parser, positional=False, required=False)
    parser.add_argument("--out", required=True, metavar="CSV", help="contrast table to write")
    parser.add_argument("--transitions", metavar="CSV", default=None,
                        help="also write the lag-1 transition table here (needs --sequences)")
    parser.add_argument("--pairwise", metavar="CSV", default=None,
                        help="with more than two groups, also write pairwise comparisons here")
    parser.add_argument("--groups", metavar="A,B", default=None,
                        help="comma-separated group names to compare (default: all groups)")
    _options.add_execution_options(parser, scheduler=False)
    g = _options.add_contrast_options(parser)
    g.add_argument("--redundancy-order", choices=("significance", "length"),
                   default="significance",
                   help="which of two near-duplicates is kept (default: significance)")
    g.add_argument("--drop-redundant", action="store_true",
                   help="leave redundant patterns out of the table")
    g.add_argument("--rate-unit", choices=("tokens", "actions", "count"), default=None,
                   help="rates per 100 tokens, per 100 actions or raw counts (default: "
                        "tokens with --sequences, else count)")
    add_option(g, "transitions", "exclude_pauses", action=OnOffAction,
               help="transitions skip pause tokens (default: {default})")


def run(args):
    """Run ``seqmine contrast`` (quiet mode is set by the command line per call)."""
    from ...encoding.sequences import SequenceDB
    from ...scoring.contrast import contrast, pairwise_contrast
    from ...scoring.transitions import transitions
    ps = read_patternset(args.patterns)
    db = SequenceDB.load(args.sequences) if args.sequences else None
    if args.transitions and db is None:
        raise ParameterError("--transitions needs --sequences DIR (the sequence database "
                             "folder).")
    groups = [g.strip() for g in args.groups.split(",")] if args.groups else None
    table = contrast(ps, db, groups=groups, correction=args.correction, alpha=args.alpha,
                     n_permutations=args.permutations, random_state=args.seed,
                     n_bootstrap=args.bootstrap,
                     n_replication_splits=args.replication_splits,
                     n_volume_strata=args.volume_strata, redundancy=args.redundancy,
                     redundancy_order=args.redundancy_order,
                     drop_redundant=args.drop_redundant, rate_unit=args.rate_unit,
                     unit=args.contrast_unit, n_jobs=args.jobs)
    out = _writable(args.out, "--out")
    write_csv(table, out)
    ev = table["evidence"].value_counts()
    messages = [f"wrote {len(table)} patterns to {out} "
                f"({int((table['q_value'] <= args.alpha).sum())} with q <= {args.alpha} "
                f"by {args.correction}; evidence: {int(ev.get('order', 0))} order, "
                f"{int(ev.get('presence', 0))} presence, {int(ev.get('volume', 0))} volume "
                f"only)"]
    if args.pairwise:
        if len(table.attrs.get("groups", [])) < 3:
            raise ParameterError("--pairwise needs more than two compared groups; the two-group "
                                 "table already holds the pairwise comparison.")
        pw = pairwise_contrast(ps, db, groups=groups,
                               correction="bh" if args.correction == "bh" else "holm",
                               alpha=args.alpha, rate_unit=args.rate_unit,
                               unit=args.contrast_unit)
        path = _writable(args.pairwise, "--pairwise")
        write_csv(pw, path)
        messages.append(f"wrote {len(pw)} pairwise rows to {path}")
    if args.transitions:
        tr = transitions(db, exclude_pauses=args.exclude_pauses)
        path = _writable(args.transitions, "--transitions")
        write_csv(tr, path)
        messages.append(f"wrote {len(tr)} transition rows to {path}")
    if not is_quiet():
        print("\n".join(messages))
    return 0


def read_patternset(path):
    """Read a pattern set folder written by ``seqmine mine`` (or the path of its CSV)."""
    from ...mining.miner import load_patternset
    folder = Path(path)
    if folder.suffix.lower() == ".csv":
        folder = folder.parent
    if not folder.exists():
        raise DataFileError(f"{folder}: no such pattern set folder; create it with "
                            f"'seqmine mine SEQUENCES_DIR --out {folder}'.")
    return load_patternset(folder)


def _writable(path, option):
    p = Path(path)
    if p.exists() and p.is_dir():
        raise ParameterError(f"{option} {p} is a folder; give a file name such as {p / 'x.csv'}.")
    p.parent.mkdir(parents=True, exist_ok=True)
    return p
