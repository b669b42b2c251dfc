"""``seqmine detectors``: select contrast patterns and write a detectors file."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..._util.progress import is_quiet
from ...errors import DataFileError, ParameterError
from ._options import number_or_word

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "detectors"
HELP = "select validated patterns and write them as live detectors (detectors.json)"
DESCRIPTION = (
    "Read the contrast table written by 'seqmine contrast' (patterns.csv) and the "
    "sequence database the patterns were mined on (for the encoding: symbol template, "
    "action mapping, pause bins, repeat collapsing), keep the patterns that are "
    "significant, large enough, stable and not redundant, and write detectors.json for "
    "'seqmine watch'. Matching constraints (max gap, max window, skip pauses) come from "
    "the miner's pattern set folder (--patterns, or a patternset.json beside the table) "
    "unless given as options. Patterns favouring the weak group become 'discourage' "
    "detectors, those favouring the strong group 'encourage' detectors. Hint texts are "
    "neutral placeholders: educators must review and rewrite them, and detectors "
    "should be piloted before they drive hints; findings are correlational."
)


def add_arguments(parser):
    """Options of ``seqmine detectors``."""
    parser.add_argument("table", metavar="CONTRAST_CSV",
                        help="contrast table (patterns.csv) written by 'seqmine contrast'")
    parser.add_argument("--sequences", "--seqdb", dest="sequences", required=True, metavar="DIR",
                        help="sequence database folder written by 'seqmine encode' (its "
                             "encoding is copied into the detectors file)")
    parser.add_argument("--patterns", metavar="DIR", default=None,
                        help="pattern set folder written by 'seqmine mine' (gives the matching "
                             "constraints; default: a patternset.json beside the table)")
    parser.add_argument("--out", required=True, metavar="JSON", help="detectors file to write")
    g = parser.add_argument_group("selection")
    g.add_argument("--max-q", type=float, default=0.05, metavar="Q",
                   help="largest q value kept (default 0.05)")
    g.add_argument("--effect", default="cohens_h", metavar="COLUMN",
                   help="effect-size column for filtering and ranking (default cohens_h)")
    g.add_argument("--min-effect", type=float, default=0.2, metavar="E",
                   help="smallest |effect| kept (default 0.2, Cohen's 'small' h)")
    g.add_argument("--min-stability", type=float, default=0.5, metavar="S",
                   help="smallest stability kept, 0 = no check (default 0.5)")
    g.add_argument("--min-length", type=int, default=None, metavar="N")
    g.add_argument("--max-length", type=int, default=None, metavar="N")
    g.add_argument("--favours", default=None, metavar="GROUPS",
                   help="comma-separated groups whose patterns are kept (default: all)")
    g.add_argument("--max-detectors", type=int, default=50, metavar="N",
                   help="most detectors written (default 50)")
    g.add_argument("--keep-redundant", action="store_true",
                   help="keep patterns contained in (or containing) a better one")
    g.add_argument("--strong-group", default=None, metavar="NAME",
                   help="name of the strong group (default: 'strong' or the first group)")
    g.add_argument("--weak-group", default=None, metavar="NAME",
                   help="name of the weak group (default: 'weak' or the second group)")
    g.add_argument("--encourage-share", default=0.5, metavar="S",
                   type=number_or_word("--encourage-share", float, minimum=0, maximum=1),
                   help="share of the detectors that encourage (patterns of the strong "
                        "group), 0-1; slots one direction cannot fill go to the other; "
                        "'none' = no balance (default 0.5)")
    g.add_argument("--no-examples", dest="examples", action="store_false",
                   help="leave out the short example excerpt of each detector")
    g = parser.add_argument_group("matching and absence rules")
    g.add_argument("--max-gap", type=_opt_int, default=argparse.SUPPRESS, metavar="N",
                   help="override the pattern set's max gap ('none' = unlimited)")
    g.add_argument("--max-window", type=_opt_int, default=argparse.SUPPRESS, metavar="N",
                   help="override the pattern set's max window ('none' = unlimited)")
    g.add_argument("--skip-pauses", choices=("yes", "no"), default=None,
                   help="override whether pauses count toward gaps and windows")
    g.add_argument("--absence-events", default="auto", metavar="N",
                   type=number_or_word("--absence-events", int, minimum=1,
                                       words={"auto": "auto", "off": None, "none": None}),
                   help="encourage detectors hint when the pattern has not been shown after "
                        "N events of a sequence; 'auto' (default) takes, per detector, the "
                        "point by which 3 in 4 learners of the strong group who showed it "
                        "had shown it; 'off' switches it off")
    g.add_argument("--absence-seconds", type=float, default=None, metavar="S",
                   help="... or after S seconds of a sequence (default: off)")


def run(args):
    import pandas as pd

    from ...detection.detectors import export_detectors, save_detectors
    from ...encoding.sequences import SequenceDB
    """Run ``seqmine detectors``."""
    table_path = Path(args.table)
    if not table_path.is_file():
        raise DataFileError(f"{table_path}: contrast table not found; create it with "
                            f"'seqmine contrast'.")
    try:
        table = pd.read_csv(table_path, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{table_path}: unreadable CSV ({' '.join(str(exc).split())}); "
                            f"write it again with 'seqmine contrast'.") from None
    db = SequenceDB.load(args.sequences)
    constraints, source = _constraints(args, table_path)
    lengths = None
    if args.min_length is not None or args.max_length is not None:
        lengths = (args.min_length, args.max_length)
    groups = [g.strip() for g in args.favours.split(",") if g.strip()] if args.favours else None
    doc = export_detectors(
        table, db, constraints, max_q=args.max_q, min_effect=args.min_effect,
        effect=args.effect, min_stability=args.min_stability, lengths=lengths, groups=groups,
        max_detectors=args.max_detectors, drop_redundant=not args.keep_redundant,
        strong=args.strong_group, weak=args.weak_group,
        encourage_share=args.encourage_share, examples=args.examples,
        absence_after_events=args.absence_events, absence_after_seconds=args.absence_seconds)
    doc["selection"].update(source=str(table_path), constraints_from=source)
    out = save_detectors(doc, args.out)
    if not is_quiet():
        n_dis = sum(d["direction"] == "discourage" for d in doc["detectors"])
        print(f"wrote {len(doc['detectors'])} detectors ({n_dis} discourage, "
              f"{len(doc['detectors']) - n_dis} encourage) from {len(table)} patterns to {out}; "
              f"review every hint text before use")
    return 0


def _opt_int(text):
    t = str(text).strip().lower()
    if t in ("none", "off"):
        return None
    try:
        v = int(t)
    except ValueError:
        raise ParameterError(f"Expected a whole number or 'none'. Got {text!r} instead.") from None
    if v < 0:
        raise ParameterError(f"Expected a whole number >= 0 or 'none'. Got {text!r} instead.")
    return v


def _constraints(args, table_path):
    """Matching constraints: options over the miner's patternset.json."""
    found = {}
    source = "defaults (no pattern set found)"
    candidates = ([Path(args.patterns)] if args.patterns else
                  [table_path.parent, table_path.parent / "patterns"])
    for folder in candidates:
        meta = folder / "patternset.json" if folder.is_dir() else folder
        if meta.is_file():
            try:
                found = dict(json.loads(meta.read_text(encoding="utf-8")).get("constraints") or {})
            except (json.JSONDecodeError, UnicodeDecodeError, AttributeError):
                raise DataFileError(f"{meta}: unreadable pattern set metadata; re-run "
                                    f"'seqmine mine'.") from None
            source = str(meta)
            break
        if args.patterns:
            raise DataFileError(f"{folder}: no patternset.json there; pass the folder written "
                                f"by 'seqmine mine'.")
    out = {"max_gap": found.get("max_gap"), "max_window": found.get("max_window"),
           "skip_pauses": bool(found.get("skip_pauses", False))}
    if hasattr(args, "max_gap"):
        out["max_gap"] = args.max_gap
    if hasattr(args, "max_window"):
        out["max_window"] = args.max_window
    if args.skip_pauses is not None:
        out["skip_pauses"] = args.skip_pauses == "yes"
    return out, source
