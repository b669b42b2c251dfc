"""``seqmine analyze``: the whole pipeline from logs to the output folder and report."""

from __future__ import annotations

import argparse

from ...config import EVENT_ROLES, default_config, load_config, merge_config
from . import _options
from ._options import print_warnings

NAME = "analyze"
HELP = "run every stage on your event log and outcomes and write the output folder"
DESCRIPTION = ("Load and validate the events and outcomes, encode, mine ordered patterns, "
               "score those that differ between outcome groups, compare transitions and "
               "phase models, measure early prediction, export detectors and write "
               "report.html. Options come from the defaults, then --config FILE (TOML), "
               "then the flags given here.")

# (argparse dest, config section, config key, converter)
_FLAG_TO_CONFIG = [
    *[(f"{role}_column", "events", f"{role}_column", None) for role in EVENT_ROLES],
    ("format", "events", "format", None),
    ("delimiter", "events", "delimiter", None),
    ("encoding", "events", "encoding", None),
    ("keep_duplicates", "events", "duplicates", lambda v: "keep" if v else "reject"),
    ("max_bytes", "events", "max_bytes", int),
    ("outcome_learner_column", "outcomes", "learner_column", None),
    ("pre_column", "outcomes", "pre_column", None),
    ("post_column", "outcomes", "post_column", None),
    ("max_column", "outcomes", "max_column", None),
    ("score_column", "outcomes", "score_column", None),
    ("label_column", "outcomes", "label_column", None),
    ("max_score", "outcomes", "max_score", None),
    ("grouping", "outcomes", "grouping", None),
    ("group_fraction", "outcomes", "fraction", None),
    ("low", "outcomes", "low", None),
    ("high", "outcomes", "high", None),
    ("template", "encode", "template", None),
    ("mapping", "encode", "mapping", None),
    ("collapse_repeats", "encode", "collapse_repeats", None),
    ("pause_strategy", "encode", "pause_strategy", None),
    ("pause_bins", "encode", "pause_bins", None),
    ("pause_thresholds", "encode", "pause_thresholds",
     lambda v: _options.parse_float_list(v, "--pause-thresholds")),
    ("implicit_pauses", "encode", "implicit_pauses",
     lambda v: [x.strip() for x in (v or "").split(",") if x.strip()]),
    ("unit", "encode", "unit", None),
    ("session_gap", "encode", "session_gap", None),
    ("min_support", "mine", "min_support", None),
    ("min_length", "mine", "min_length", None),
    ("max_length", "mine", "max_length", None),
    ("max_gap", "mine", "max_gap", lambda v: None if v < 0 else v),
    ("max_window", "mine", "max_window", None),
    ("count_pauses", "mine", "skip_pauses", lambda v: not v),
    ("max_patterns", "mine", "max_patterns", None),
    ("correction", "contrast", "correction", None),
    ("permutations", "contrast", "n_permutations", None),
    ("alpha", "contrast", "alpha", None),
    ("folds", "validate", "folds", None),
    ("no_phases", "phases", "enabled", lambda v: not v),
    ("no_validate", "validate", "enabled", lambda v: not v),
    ("no_examples", "report", "examples", lambda v: not v),
    ("pseudonymize", "privacy", "pseudonymize_key", None),
]


def add_arguments(p):
    p.add_argument("events", metavar="EVENTS", help="event log (CSV, TSV, Parquet, JSONL or xAPI JSON)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created)")
    p.add_argument("--config", metavar="FILE", default=None, help="TOML file with options")
    p.add_argument("--seed", type=int, default=None, help="random seed (default: 20261202)")
    p.add_argument("--jobs", type=int, default=None, help="parallel processes (default: 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="run the parallel parts on a Dask cluster: tcp://host:8786, or 'local' "
                        "for a local cluster with --jobs workers (needs "
                        "pip install \"seqmine[distributed]\")")
    p.add_argument("--pseudonymize", metavar="KEY_FILE", default=None,
                   help="replace learner identifiers in every output by a keyed hash")
    _options.add_event_options(p)
    _options.add_outcome_options(p)
    _options.add_encoding_options(p)
    g = p.add_argument_group("mining and statistics")
    g.add_argument("--min-support", type=float, default=0.2,
                   help="minimum share of a group's sequences (default: 0.2)")
    g.add_argument("--min-length", type=int, default=2, help="shortest pattern (default: 2)")
    g.add_argument("--max-length", type=int, default=4, help="longest pattern (default: 4)")
    g.add_argument("--max-gap", type=int, default=0,
                   help="tokens allowed between pattern items; -1 = unlimited (default: 0, "
                        "i.e. consecutive)")
    g.add_argument("--max-window", type=int, default=None, help="longest span in tokens")
    g.add_argument("--count-pauses", action="store_true",
                   help="pause tokens count in gaps (default: they do not, so 'a > b' also "
                        "matches a, pause, b)")
    g.add_argument("--max-patterns", type=int, default=200_000,
                   help="stop when more patterns would be mined (default: 200000)")
    g.add_argument("--correction", choices=["bh", "holm", "westfall-young"], default="bh",
                   help="multiple-comparison control (default: bh)")
    g.add_argument("--permutations", type=int, default=1000,
                   help="permutations for westfall-young (default: 1000)")
    g.add_argument("--alpha", type=float, default=0.05, help="significance level (default: 0.05)")
    g.add_argument("--folds", type=int, default=5, help="cross-validation folds (default: 5)")
    g.add_argument("--no-phases", action="store_true", help="skip the hidden Markov models")
    g.add_argument("--no-validate", action="store_true", help="skip the early-prediction check")
    g.add_argument("--no-examples", action="store_true",
                   help="no log excerpts in the report")
    # A flag overrides the configuration only when it is given: no parser defaults.
    keep = {"help", "events", "out", "outcomes", "config", "debug", "quiet"}
    for action in p._actions:
        if action.dest not in keep:
            action.default = argparse.SUPPRESS


def config_from_args(args, parser_defaults):
    """Defaults < --config file < flags given on the command line."""
    cfg = load_config(args.config) if getattr(args, "config", None) else default_config()
    over = {}
    for dest, section, key, conv in _FLAG_TO_CONFIG:
        if not hasattr(args, dest):  # not given on the command line
            continue
        value = getattr(args, dest)
        over.setdefault(section, {})[key] = conv(value) if conv else value
    for key in ("seed", "jobs", "scheduler"):
        if getattr(args, key, None) is not None:
            over[key] = getattr(args, key)
    return merge_config(cfg, over, source="command line")


def run(args):
    from ...pipeline import analyze
    cfg = config_from_args(args, args._defaults)
    result = analyze(args.events, args.outcomes, args.out, cfg, quiet=args.quiet)
    if not args.quiet:
        print(result.message())
    print_warnings(result.warnings)
    return 0
