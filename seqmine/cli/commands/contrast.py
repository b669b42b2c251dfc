"""``seqmine contrast``: score mined patterns (and lag-1 transitions) between outcome groups."""

from __future__ import annotations

from pathlib import Path

from ..._util.csvio import write_csv
from ..._util.progress import is_quiet
from ...config import CONTRAST_CORRECTIONS
from ...errors import DataFileError, ParameterError

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run", "read_patternset"]

NAME = "contrast"
HELP = "test which mined patterns separate the outcome groups (patterns.csv, transitions.csv)"
DESCRIPTION = (
    "Read a pattern set written by 'seqmine mine' and score every pattern for how it "
    "separates the outcome groups: per-group support and rate, Fisher's exact test on "
    "presence, Mann-Whitney U on rates, effect sizes, multiple-comparison control "
    "(Benjamini-Hochberg, Holm or a Westfall-Young permutation test), bootstrap stability "
    "and redundancy marks. With --transitions (needs --seqdb) also writes the lag-1 "
    "transition table with adjusted residuals. Findings are correlational."
)


def add_arguments(parser):
    """Options of ``seqmine contrast``."""
    parser.add_argument("patterns", metavar="PATTERNS_DIR",
                        help="pattern set folder written by 'seqmine mine' (or its .csv table)")
    parser.add_argument("--seqdb", metavar="DIR", default=None,
                        help="sequence database folder the patterns were mined on (gives "
                             "sequence lengths for rates; needed for --transitions)")
    parser.add_argument("--out", required=True, metavar="CSV", help="contrast table to write")
    parser.add_argument("--transitions", metavar="CSV", default=None,
                        help="also write the lag-1 transition table here")
    parser.add_argument("--pairwise", metavar="CSV", default=None,
                        help="with more than two groups, also write pairwise comparisons here")
    parser.add_argument("--groups", metavar="A,B", default=None,
                        help="comma-separated group names to compare (default: all groups)")
    parser.add_argument("--correction", choices=CONTRAST_CORRECTIONS, default="bh",
                        help="multiple-comparison control of q_value (default bh)")
    parser.add_argument("--alpha", type=float, default=0.05, metavar="A",
                        help="level for 'favours' and stability (default 0.05)")
    parser.add_argument("--permutations", type=int, default=1000, metavar="N",
                        help="label permutations for westfall-young (default 1000)")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of permutations and resamples (default 0)")
    parser.add_argument("--stability-resamples", type=int, default=100, metavar="N",
                        help="bootstrap resamples for the stability column, 0 = skip "
                             "(default 100)")
    parser.add_argument("--redundancy", default="0.9", metavar="J",
                        help="Jaccard threshold for redundancy marks, or 'none' (default 0.9)")
    parser.add_argument("--redundancy-order", choices=("significance", "length"),
                        default="significance",
                        help="which of two near-duplicates is kept (default significance)")
    parser.add_argument("--drop-redundant", action="store_true",
                        help="leave redundant patterns out of the table")
    parser.add_argument("--rate-unit", choices=("tokens", "actions", "count"), default=None,
                        help="rates per 100 tokens, per 100 actions or raw counts (default: "
                             "tokens with --seqdb, else count)")
    parser.add_argument("--unit", choices=("sequence", "learner"), default="sequence",
                        help="unit of analysis; 'learner' merges each learner's sessions "
                             "first (needs --seqdb; default sequence)")
    parser.add_argument("--exclude-pauses", action="store_true",
                        help="transitions skip pause tokens")


def run(args):
    from ...encoding.sequences import SequenceDB
    from ...scoring.contrast import contrast, pairwise_contrast
    from ...scoring.transitions import transitions
    """Run ``seqmine contrast`` (quiet mode is set by the command line per call)."""
    ps = read_patternset(args.patterns)
    db = SequenceDB.load(args.seqdb) if args.seqdb else None
    if args.transitions and db is None:
        raise ParameterError("--transitions needs --seqdb DIR (the sequence database folder).")
    redundancy = _redundancy(args.redundancy)
    groups = [g.strip() for g in args.groups.split(",")] if args.groups else None
    table = contrast(ps, db, groups=groups, correction=args.correction, alpha=args.alpha,
                     n_permutations=args.permutations, seed=args.seed,
                     stability_resamples=args.stability_resamples, redundancy=redundancy,
                     redundancy_order=args.redundancy_order,
                     drop_redundant=args.drop_redundant, rate_unit=args.rate_unit,
                     unit=args.unit)
    out = _writable(args.out, "--out")
    write_csv(table, out)
    messages = [f"wrote {len(table)} patterns to {out} "
                f"({int((table['favours'] != '').sum())} with q <= {args.alpha} "
                f"by {args.correction})"]
    if args.pairwise:
        if len(table.attrs.get("groups", [])) < 3:
            raise ParameterError("--pairwise needs more than two compared groups; the two-group "
                                 "table already holds the pairwise comparison.")
        pw = pairwise_contrast(ps, db, groups=groups,
                               correction="bh" if args.correction == "bh" else "holm",
                               alpha=args.alpha, rate_unit=args.rate_unit, unit=args.unit)
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
    from ...mining.miner import load_patternset
    """Read a pattern set folder written by ``seqmine mine`` (or the path of its CSV)."""
    folder = Path(path)
    if folder.suffix.lower() == ".csv":
        folder = folder.parent
    if not folder.exists():
        raise DataFileError(f"{folder}: no such pattern set folder; create it with "
                            f"'seqmine mine SEQDB_DIR --out {folder}'.")
    return load_patternset(folder)


def _redundancy(text):
    t = str(text).strip().lower()
    if t in ("none", "off", "0"):
        return None
    try:
        return float(t)
    except ValueError:
        raise ParameterError(f"--redundancy must be a Jaccard threshold in (0, 1] such as 0.9, "
                             f"or 'none'. Got {text!r} instead.") from None


def _writable(path, option):
    p = Path(path)
    if p.exists() and p.is_dir():
        raise ParameterError(f"{option} {p} is a folder; give a file name such as {p / 'x.csv'}.")
    p.parent.mkdir(parents=True, exist_ok=True)
    return p
