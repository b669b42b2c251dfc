"""``seqmine detectors``: select contrast patterns and write a detectors file."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..._util.progress import is_quiet
from ...errors import DataFileError, OptionValueError, ParameterError
from . import _options
from ._options import OnOffAction, add_option

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "detectors"
HELP = "select validated patterns and write them as live detectors (detectors.json)"
DESCRIPTION = (
    "Read the contrast table written by 'seqmine contrast' (patterns.csv) and the "
    "sequence database the patterns were mined on (for the encoding: symbol template, "
    "action mapping, pause bins, repeat collapsing), keep the patterns that are "
    "significant after the volume adjustment (by default), large enough, stable and not "
    "redundant, and write detectors.json for "
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
                        help="contrast table (patterns.csv) written by 'seqmine contrast', or "
                             "an output folder of 'seqmine analyze' to re-select its detectors")
    _options.add_sequences_option(parser, positional=False, required=False)
    parser.add_argument("--patterns", metavar="DIR", default=None,
                        help="pattern set folder written by 'seqmine mine' (gives the matching "
                             "constraints; default: a patternset.json beside the table)")
    parser.add_argument("--out", default=None, metavar="JSON",
                        help="detectors file to write (default with an output folder as "
                             "CONTRAST_CSV: its detectors.json)")
    g = parser.add_argument_group("selection")
    add_option(g, "detectors", "max_q", type=float, metavar="Q",
               help="largest q value kept (default: {default})")
    add_option(g, "detectors", "effect", metavar="COLUMN",
               help="effect-size column for filtering and ranking (default: {default})")
    add_option(g, "detectors", "min_effect", type=float, metavar="E",
               help="smallest |effect| kept (default: {default}, Cohen's 'small' h)")
    add_option(g, "detectors", "min_stability", type=float, metavar="S",
               help="smallest stability kept, 0 = no check (default: {default})")
    g.add_argument("--min-length", type=int, default=None, metavar="N")
    g.add_argument("--max-length", type=int, default=None, metavar="N")
    g.add_argument("--favours", default=None, metavar="GROUPS",
                   help="comma-separated groups whose patterns are kept (default: all)")
    add_option(g, "detectors", "max_detectors", type=_options.int_or_none, metavar="N",
               help="most detectors written, or 'none' (default: {default})")
    _options.add_evidence_option(g)
    g.add_argument("--keep-redundant", action="store_true",
                   help="keep patterns contained in (or containing) a better one")
    g.add_argument("--strong-group", default=None, metavar="NAME",
                   help="name of the strong group (default: 'strong' or the first group)")
    g.add_argument("--weak-group", default=None, metavar="NAME",
                   help="name of the weak group (default: 'weak' or the second group)")
    add_option(g, "detectors", "encourage_share", type=_options.float_or_none, metavar="S",
               help="share of the detectors that encourage (patterns of the strong group), "
                    "0-1; slots one direction cannot fill go to the other; 'none' = no "
                    "balance (default: {default})")
    add_option(g, "detectors", "examples", action=OnOffAction,
               help="one short example excerpt per detector (default: {default})")
    g = parser.add_argument_group("matching and absence rules")
    g.add_argument("--max-gap", type=_opt_int, default=argparse.SUPPRESS, metavar="N",
                   help="override the pattern set's max gap ('none' = no limit)")
    g.add_argument("--max-window", type=_opt_int, default=argparse.SUPPRESS, metavar="N",
                   help="override the pattern set's max window ('none' = no limit)")
    g.add_argument("--skip-pauses", action=OnOffAction, default=None,
                   help="override whether pause tokens count toward gaps and windows "
                        "(default: as the pattern set was mined)")
    g.add_argument("--absence-events", type=_absence_events, default="auto", metavar="N",
                   help="encourage detectors hint when the pattern has not been shown after "
                        "N events of a sequence; 'auto' (default) sets it per detector from "
                        "the data (see --absence-quantile); 'none' switches it off")
    add_option(g, "detectors", "absence_quantile", type=float, metavar="Q",
               help="with --absence-events auto: the point by which this share of the "
                    "strong group's learners who showed the pattern had shown it "
                    "(default: {default})")
    g.add_argument("--absence-seconds", type=float, default=None, metavar="S",
                   help="... or after S seconds of a sequence (default: off)")


def run(args):
    """Run ``seqmine detectors``."""
    from ...detection.detectors import save_detectors
    from ...encoding.sequences import SequenceDB
    from ...pipeline import target_run_folder
    folder = target_run_folder(args.table, args.out)
    if folder is not None:
        return _run_in_folder(args, folder)
    if args.out is None or args.sequences is None:
        raise ParameterError("--out JSON and --sequences DIR are needed unless CONTRAST_CSV is "
                             "an output folder of 'seqmine analyze'.")
    table_path = Path(args.table)
    table = _read_table(table_path)
    db = SequenceDB.load(args.sequences)
    constraints, source = _constraints(args, table_path)
    doc = _export(args, table, db, constraints)
    doc["selection"].update(source=str(table_path), constraints_from=source)
    from ..._util.outdir import writing_file
    with writing_file(args.out, "--out", inputs=[args.table]) as tmp:
        save_detectors(doc, tmp)
    _say(doc, table, args.out)
    return 0


def _read_table(table_path):
    import pandas as pd

    from ..._util.csvio import read_csv
    if not table_path.is_file():
        raise DataFileError(f"{table_path}: contrast table not found; create it with "
                            f"'seqmine contrast'.")
    try:
        return read_csv(table_path, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{table_path}: unreadable CSV ({' '.join(str(exc).split())}); "
                            f"write it again with 'seqmine contrast'.") from None


def _export(args, table, db, constraints):
    from ...detection.detectors import export_detectors
    lengths = None
    if args.min_length is not None or args.max_length is not None:
        lengths = (args.min_length, args.max_length)
    groups = [g.strip() for g in args.favours.split(",") if g.strip()] if args.favours else None
    return export_detectors(
        table, db, constraints, max_q=args.max_q, min_effect=args.min_effect,
        effect=args.effect, min_stability=args.min_stability, lengths=lengths, groups=groups,
        max_detectors=args.max_detectors, drop_redundant=not args.keep_redundant,
        evidence=args.evidence, strong=args.strong_group, weak=args.weak_group,
        encourage_share=args.encourage_share, examples=args.examples,
        absence_after_events=args.absence_events, absence_quantile=args.absence_quantile,
        absence_after_seconds=args.absence_seconds)


def _say(doc, table, out):
    if not is_quiet():
        n_dis = sum(d["direction"] == "discourage" for d in doc["detectors"])
        print(f"wrote {len(doc['detectors'])} detectors ({n_dis} discourage, "
              f"{len(doc['detectors']) - n_dis} encourage) from {len(table)} patterns to {out}; "
              f"review every hint text before use")


def _run_in_folder(args, folder):
    """Re-run the detectors stage of an output folder, from its own contrast table."""
    from ..._util.runrecord import read_summary
    from ...detection.detectors import save_detectors
    from ...encoding.sequences import SequenceDB
    from ...errors import OutputError
    from ...pipeline import detectors_summary, own_stage_folder, rerun_stage, stage_output_folder
    stages = (read_summary(folder) or {}).get("stages") or {}
    contrast = stages.get("contrast") or {}
    table_name = (contrast.get("settings") or {}).get("table", "patterns.csv")
    tables = [rel for rel in (contrast.get("outputs") or {}) if rel == table_name]
    if contrast.get("status") != "done" or not tables:
        raise DataFileError(f"{folder}: the run record lists no contrast table to select "
                            f"detectors from; run 'seqmine contrast {folder}' first.")
    db_dir = own_stage_folder(folder, "encode", args.sequences)
    ps_dir = stage_output_folder(folder, "mine", "patternset.json")
    own = [(Path(folder) / tables[0]).resolve(), Path(folder).resolve()]
    if Path(args.table).resolve() not in own:
        raise OutputError(f"{args.table} is not the contrast table of the run in {folder}; "
                          f"detectors written there must come from {own[0]}.")
    name = "detectors.json"
    if args.out and Path(args.out).resolve() != Path(folder).resolve():
        rel = Path(args.out).resolve().relative_to(Path(folder).resolve())
        if len(rel.parts) != 1 or rel.suffix.lower() != ".json":
            raise ParameterError(f"--out {args.out}: inside an output folder the detectors "
                                 f"file is a .json file directly in {folder}.")
        name = rel.name
    if args.patterns is None and ps_dir is not None:
        args.patterns = str(ps_dir)
    settings = {k: getattr(args, k) for k in (
        "max_q", "effect", "min_effect", "min_stability", "min_length", "max_length",
        "favours", "max_detectors", "keep_redundant", "strong_group", "weak_group",
        "absence_events", "absence_seconds", "encourage_share", "absence_quantile",
        "examples")}

    def work(st):
        table = _read_table(st.path / tables[0])
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        constraints, source = _constraints(args, Path(folder) / tables[0])
        doc = _export(args, table, db, constraints)
        doc["selection"].update(source=tables[0], constraints_from=str(
            Path(source).relative_to(folder)) if Path(source).is_absolute() and
            Path(source).is_relative_to(folder) else source)
        save_detectors(doc, st.path / name)
        return detectors_summary(doc), (doc, table)

    (doc, table), target, _ = rerun_stage(
        folder, "detectors", NAME, work, settings=settings, config_section="detectors",
        config_values={"max_q": args.max_q, "min_stability": args.min_stability,
                       "max_detectors": args.max_detectors,
                       "encourage_share": args.encourage_share,
                       "absence_quantile": args.absence_quantile, "examples": args.examples})
    _say(doc, table, target / name)
    return 0


def _absence_events(text):
    """``auto``, ``none`` or a whole number of events >= 1."""
    if str(text).strip().lower() == "auto":
        return "auto"
    v = _options.int_or_none(text)
    if v is not None and v < 1:
        raise OptionValueError(f"expected a whole number >= 1, 'auto' or 'none'; got {text!r}")
    return v


def _opt_int(text):
    v = _options.int_or_none(text)
    if v is not None and v < 0:
        raise OptionValueError(f"expected a whole number >= 0 or 'none'; got {text!r}")
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
        out["skip_pauses"] = bool(args.skip_pauses)
    return out, source
