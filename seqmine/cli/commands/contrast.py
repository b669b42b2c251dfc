"""``seqmine contrast``: score mined patterns (and lag-1 transitions) between outcome groups."""

from __future__ import annotations

from pathlib import Path

from ..._util.csvio import read_csv, write_csv
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
    "presence, Mann-Whitney U on rates, effect sizes, multiple-comparison control "
    "(Benjamini-Hochberg, Holm or a Westfall-Young permutation test), bootstrap stability "
    "and redundancy marks. With --transitions (needs --sequences) also writes the lag-1 "
    "transition table with adjusted residuals. Findings are correlational."
)


#: Options that, when a contrast is re-run in an output folder and they are not given,
#: keep the value of the folder's record: argparse destination -> recorded setting.
_FROM_RECORD = {"correction": "correction", "alpha": "alpha", "permutations": "n_permutations",
                "bootstrap": "n_bootstrap", "redundancy": "redundancy", "seed": "seed",
                "redundancy_order": "redundancy_order", "drop_redundant": "drop_redundant",
                "rate_unit": "rate_unit", "contrast_unit": "unit",
                "replication_splits": "n_replication_splits",
                "volume_strata": "n_volume_strata"}


def add_arguments(parser):
    """Options of ``seqmine contrast``."""
    parser.add_argument("patterns", metavar="PATTERNS_DIR",
                        help="pattern set folder written by 'seqmine mine' (or its .csv table), "
                             "or an output folder of 'seqmine analyze' to re-run its contrast")
    _options.add_sequences_option(parser, positional=False, required=False)
    parser.add_argument("--out", metavar="CSV", default=None,
                        help="contrast table to write (default with an output folder: its "
                             "patterns.csv, replacing the run's contrast)")
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
    # remember which options were given: re-running in an output folder keeps the
    # record's values for the others
    for action in parser._actions:
        if action.dest in _FROM_RECORD:
            action.__class__ = _remembered(type(action))


def run(args):
    """Run ``seqmine contrast`` (quiet mode is set by the command line per call)."""
    from ...encoding.sequences import SequenceDB
    from ...pipeline import target_run_folder
    from ...scoring.contrast import pairwise_contrast
    from ...scoring.transitions import transitions
    folder = target_run_folder(args.patterns, args.out)
    if folder is not None:
        return _run_in_folder(args, folder)
    if args.out is None:
        raise ParameterError("--out CSV is needed unless PATTERNS_DIR is an output folder of "
                             "'seqmine analyze' (whose contrast is then re-run).")
    opts = _resolved(args, {})
    ps = read_patternset(args.patterns)
    db = SequenceDB.load(args.sequences) if args.sequences else None
    if args.transitions and db is None:
        raise ParameterError("--transitions needs --sequences DIR (the sequence database "
                             "folder).")
    groups = [g.strip() for g in args.groups.split(",")] if args.groups else None
    table = _contrast(ps, db, groups, opts, args.jobs)
    reads = [args.patterns, args.sequences]
    messages = [_write(table, args.out, "--out", reads, "patterns") + _tally(table, opts)]
    if args.pairwise:
        if len(table.attrs.get("groups", [])) < 3:
            raise ParameterError("--pairwise needs more than two compared groups; the two-group "
                                 "table already holds the pairwise comparison.")
        pw = pairwise_contrast(ps, db, groups=groups,
                               correction="bh" if opts["correction"] == "bh" else "holm",
                               alpha=opts["alpha"], rate_unit=opts["rate_unit"],
                               unit=opts["contrast_unit"],
                               n_volume_strata=opts["volume_strata"])
        messages.append(_write(pw, args.pairwise, "--pairwise", reads, "pairwise rows"))
    if args.transitions:
        tr = transitions(db, exclude_pauses=args.exclude_pauses)
        messages.append(_write(tr, args.transitions, "--transitions", reads, "transition rows"))
    if not is_quiet():
        print("\n".join(messages))
    return 0


def _write(table, path, option, reads, what):
    from ..._util.outdir import writing_file
    with writing_file(path, option, inputs=reads) as tmp:
        write_csv(table, tmp)
    return f"wrote {len(table)} {what} to {path}"


def _contrast(ps, db, groups, opts, n_jobs=1):
    from ...scoring.contrast import contrast
    return contrast(ps, db, groups=groups, correction=opts["correction"], alpha=opts["alpha"],
                    n_permutations=opts["permutations"], random_state=opts["seed"],
                    n_bootstrap=opts["bootstrap"],
                    n_replication_splits=opts["replication_splits"],
                    n_volume_strata=opts["volume_strata"], redundancy=opts["redundancy"],
                    redundancy_order=opts["redundancy_order"],
                    drop_redundant=opts["drop_redundant"], rate_unit=opts["rate_unit"],
                    unit=opts["contrast_unit"], n_jobs=n_jobs)


def _tally(table, opts):
    """`` (N with q <= A by CORRECTION; evidence: ... )`` for the result line."""
    ev = table["evidence"].fillna("").value_counts() if "evidence" in table else {}
    return (f" ({int((table['q_value'] <= opts['alpha']).sum())} with q <= {opts['alpha']} "
            f"by {opts['correction']}; evidence: {int(ev.get('order', 0))} order, "
            f"{int(ev.get('presence', 0))} presence, {int(ev.get('volume', 0))} volume only)")


def _remembered(cls):
    """``cls`` (an argparse action class) that also notes in the namespace that its
    option was given (argparse calls an action only for options on the command line)."""
    def __call__(self, parser, namespace, values, option_string=None):
        cls.__call__(self, parser, namespace, values, option_string)
        given = set(getattr(namespace, "_given", ()))
        given.add(self.dest)
        namespace._given = given
    return type(f"Remembered{cls.__name__}", (cls,), {"__call__": __call__})


def _resolved(args, recorded):
    """Option values: given on the command line, else the folder's record, else default."""
    given = getattr(args, "_given", set())
    return {dest: getattr(args, dest) if dest in given or name not in recorded
            else recorded[name] for dest, name in _FROM_RECORD.items()}


def _run_in_folder(args, folder):
    """Re-run the contrast stage of an output folder (and, when asked, its transitions)."""
    from ..._util.runrecord import read_summary
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import load_patternset
    from ...pipeline import (
        contrast_summary,
        contrast_unit,
        order_patterns,
        own_stage_folder,
        rerun_stage,
        score_tokens,
    )
    from ...scoring.contrast import pairwise_contrast

    ps_dir = own_stage_folder(folder, "mine", args.patterns)
    db_dir = own_stage_folder(folder, "encode", args.sequences)
    name = _name_in(folder, args.out, "--out", "patterns.csv")
    pw_name = _name_in(folder, args.pairwise, "--pairwise", None)
    tr_name = _name_in(folder, args.transitions, "--transitions", None)
    stages = (read_summary(folder) or {}).get("stages") or {}
    recorded = (stages.get("contrast") or {}).get("settings") or {}
    opts = _resolved(args, recorded)
    groups = [g.strip() for g in args.groups.split(",")] if args.groups else None
    settings = {name: opts[dest] for dest, name in _FROM_RECORD.items()}
    settings.update(groups=groups, table=name)

    def work(st):
        ps = load_patternset(st.path / ps_dir.relative_to(folder))
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        table = order_patterns(_contrast(ps, db, groups, opts, args.jobs))
        write_csv(table, st.path / name)
        unit = contrast_unit(opts["contrast_unit"], db)
        tokens = None
        if name == "patterns.csv":  # the run's contrast: its single-token table too
            tokens = score_tokens(
                db, correction=opts["correction"], alpha=opts["alpha"],
                n_permutations=opts["permutations"], random_state=opts["seed"],
                n_replication_splits=opts["replication_splits"],
                n_volume_strata=opts["volume_strata"], unit=unit, n_jobs=args.jobs)
            write_csv(tokens, st.path / "tokens.csv")
        if pw_name:
            if len(table.attrs.get("groups", [])) < 3:
                raise ParameterError("--pairwise needs more than two compared groups; the "
                                     "two-group table already holds the pairwise comparison.")
            write_csv(pairwise_contrast(
                ps, db, groups=groups, correction="bh" if opts["correction"] == "bh" else "holm",
                alpha=opts["alpha"], rate_unit=opts["rate_unit"], unit=opts["contrast_unit"],
                n_volume_strata=opts["volume_strata"]),
                st.path / pw_name)
        return contrast_summary(table, {
            "correction": opts["correction"], "alpha": opts["alpha"],
            "n_permutations": opts["permutations"], "n_bootstrap": opts["bootstrap"],
            "n_replication_splits": opts["replication_splits"]}, unit, tokens), table

    examples = stages.get("examples") or {}
    table, target, removed = rerun_stage(
        folder, "contrast", NAME, work, settings=settings, config_section="contrast",
        config_values={"correction": opts["correction"], "alpha": opts["alpha"],
                       "n_permutations": opts["permutations"],
                       "n_bootstrap": opts["bootstrap"], "redundancy": opts["redundancy"],
                       "unit": opts["contrast_unit"],
                       "n_replication_splits": opts["replication_splits"],
                       "n_volume_strata": opts["volume_strata"]})
    messages = [f"wrote {len(table)} patterns to {target / name}" + _tally(table, opts)]
    if examples.get("status") in ("done", "removed") and name == "patterns.csv":
        _rewrite_examples(folder, examples.get("settings") or {}, ps_dir, db_dir, opts["alpha"])
        removed = [s for s in removed if s != "examples"]
    if tr_name:
        _rewrite_transitions(folder, tr_name, db_dir, args.exclude_pauses)
        messages.append(f"wrote the transition table to {target / tr_name}")
    if removed:
        messages.append(f"removed the {', '.join(removed)} of the earlier contrast from "
                        f"{target} (run 'seqmine detectors {target}' and 'seqmine report "
                        f"{target}' to write them again)")
    if not is_quiet():
        print("\n".join(messages))
    return 0


def _name_in(folder, path, option, default):
    """File name of an output ``path`` given for a file directly in ``folder``."""
    if not path or Path(path).resolve() == Path(folder).resolve():
        return default
    try:
        rel = Path(path).resolve().relative_to(Path(folder).resolve())
    except ValueError:
        rel = None
    if rel is None or len(rel.parts) != 1 or rel.suffix.lower() != ".csv":
        raise ParameterError(f"{option} {path}: when the contrast of the output folder "
                             f"{folder} is re-run, its tables are .csv files directly in it.")
    return rel.name


def _rewrite_transitions(folder, name, db_dir, exclude_pauses):
    """The lag-1 transition table of the run (its own stage of the record)."""
    from ...encoding.sequences import SequenceDB
    from ...pipeline import rerun_stage
    from ...scoring.transitions import transitions

    def work(st):
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        write_csv(transitions(db, exclude_pauses=exclude_pauses), st.path / name)
        return {}, None

    rerun_stage(folder, "transitions", NAME, work, settings={"exclude_pauses": exclude_pauses},
                config_section="transitions", config_values={"exclude_pauses": exclude_pauses})


def _rewrite_examples(folder, settings, ps_dir, db_dir, alpha):
    """Example excerpts for the new contrast (a second step: the report shows them)."""
    from ...encoding.sequences import SequenceDB
    from ...mining.miner import load_patternset
    from ...pipeline import rerun_stage
    from ...reporting.render import write_examples

    def work(st):
        import pandas as pd
        db = SequenceDB.load(st.path / db_dir.relative_to(folder))
        c = load_patternset(st.path / ps_dir.relative_to(folder)).constraints
        table = read_csv(st.path / "patterns.csv", dtype=str, keep_default_na=False)
        for col in ("p_value", "q_value", "risk_difference"):
            if col in table.columns:
                table[col] = pd.to_numeric(table[col].replace("", None), errors="coerce")
        write_examples(st.path, db, table, max_patterns=int(settings.get("max_patterns", 15)),
                       alpha=alpha, max_gap=c.get("max_gap"), max_window=c.get("max_window"),
                       skip_pauses=bool(c.get("skip_pauses", False)),
                       random_state=int(settings.get("seed", 0)))
        return {}, None

    rerun_stage(folder, "examples", NAME, work, settings=settings)


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
