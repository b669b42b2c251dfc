"""``seqmine analyze``: the whole pipeline from logs to the output folder and report."""

from __future__ import annotations

import argparse

from ...config import default_config, load_config, merge_config
from . import _options
from ._options import OnOffAction, add_option, print_warnings

NAME = "analyze"
HELP = "run every stage on your event log and outcomes and write the output folder"
DESCRIPTION = ("Load and validate the events and outcomes, encode, mine ordered patterns, "
               "score those that differ between outcome groups, compare transitions and "
               "phase models, measure early prediction, export detectors and write "
               "report.html. Options come from the defaults, then --config FILE (TOML), "
               "then the flags given here; every flag sets the configuration key it is "
               "named after (--permutations: [contrast] n_permutations, --bootstrap: "
               "[contrast] n_bootstrap, --splits: [validate] n_splits).")


def add_arguments(p):
    p.add_argument("events", metavar="EVENTS", help="event log (CSV, TSV, Parquet, JSONL or xAPI JSON)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created)")
    p.add_argument("--config", metavar="FILE", default=None, help="TOML file with options")
    _options.add_execution_options(p)
    _options.add_privacy_option(p)
    _options.add_event_options(p)
    _options.add_outcome_options(p)
    _options.add_encoding_options(p)
    _options.add_mining_options(p)
    g = _options.add_contrast_options(p)
    add_option(g, "transitions", "exclude_pauses", action=OnOffAction,
               help="transitions skip pause tokens (default: {default})")
    g = p.add_argument_group("later stages")
    _options.add_evidence_option(g)
    add_option(g, "validate", "n_splits", type=int, metavar="K",
               help="learner folds of the early-prediction check (default: {default})")
    add_option(g, "validate", "n_repeats", type=int, metavar="R",
               help="repetitions of the fold split, each with a fresh shuffle "
                    "(default: {default})")
    add_option(g, "phases", "enabled", action="store_true", default=False,
               to_config=lambda v: not v, help="skip the hidden Markov models")
    add_option(g, "validate", "enabled", action="store_true", default=False,
               to_config=lambda v: not v, help="skip the early-prediction check")
    add_option(g, "report", "examples", action=OnOffAction,
               help="log excerpts in the report (default: {default})")
    # A flag overrides the configuration only when it is given: no parser defaults.
    keep = {"help", "events", "out", "outcomes", "config", "debug", "quiet"}
    for action in p._actions:
        if action.dest not in keep:
            action.default = argparse.SUPPRESS
    p.set_defaults(_config_flags=[(a.dest, a.config_key, a.to_config) for a in p._actions
                                  if hasattr(a, "config_key")])


def config_from_args(args):
    """Defaults < --config file < flags given on the command line."""
    cfg = load_config(args.config) if getattr(args, "config", None) else default_config()
    over = {}
    for dest, (section, key), conv in args._config_flags:
        if not hasattr(args, dest):  # not given on the command line
            continue
        value = getattr(args, dest)
        value = conv(value) if conv else value
        if section is None:
            over[key] = value
        else:
            over.setdefault(section, {})[key] = value
    return merge_config(cfg, over, source="command line")


def run(args):
    from ...pipeline import analyze
    cfg = config_from_args(args)
    result = analyze(args.events, args.outcomes, args.out, cfg, quiet=args.quiet)
    if not args.quiet:
        print(result.message())
    print_warnings(result.warnings)
    return 0
