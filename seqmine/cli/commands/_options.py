"""Option groups shared by several sub-commands, and their conversion to API objects."""

from __future__ import annotations

import argparse
import sys

from ...config import EVENT_ROLES
from ...errors import ParameterError

__all__ = ["add_event_options", "add_outcome_options", "add_encoding_options",
           "events_from_args", "outcomes_from_args", "grouping_from_args",
           "encoder_from_args", "parse_float_list", "add_privacy_option",
           "pseudonymize_inputs", "print_warnings", "number_or_word"]


def parse_float_list(text, option):
    """``"5,30"`` -> ``[5.0, 30.0]`` with a message naming the option."""
    if text is None or text == "":
        return None
    try:
        return [float(x) for x in str(text).split(",") if x.strip()]
    except ValueError:
        raise ParameterError(f"{option} takes comma-separated numbers, e.g. 5,30; got {text!r}.") from None


def number_or_word(option, kind=int, *, minimum=None, maximum=None, words=None):
    """An argparse ``type``: a number of ``kind`` in [minimum, maximum], or a word.

    ``words`` maps accepted words to their values (default: ``none`` and ``off`` ->
    None). argparse prints the message after the option's name.

    Examples
    --------
    >>> share = number_or_word("--share", float, minimum=0, maximum=1)
    >>> share("0.25"), share("none")
    (0.25, None)
    """
    words = {"none": None, "off": None} if words is None else words

    def convert(text):
        t = str(text).strip().lower()
        if t in words:
            return words[t]
        try:
            v = kind(t)
            ok = (minimum is None or v >= minimum) and (maximum is None or v <= maximum)
        except ValueError:
            ok = False
        if not ok:
            what = "a whole number" if kind is int else "a number"
            rng = (f" from {minimum:g} to {maximum:g}" if minimum is not None and maximum
                   is not None else f" >= {minimum:g}" if minimum is not None else "")
            names = " or ".join(repr(w) for w in words)
            raise argparse.ArgumentTypeError(f"must be {what}{rng}" + (
                f" or {names}" if names else "") + f"; got {text!r}")
        return v

    convert.__name__ = option.lstrip("-").replace("-", "_")
    return convert


def add_event_options(p):
    g = p.add_argument_group("event log columns and format")
    for role in EVENT_ROLES:
        g.add_argument(f"--{role}-column", metavar="NAME", default=None,
                       help=f"column holding the {role} (default: {role})")
    g.add_argument("--format", choices=["csv", "tsv", "parquet", "jsonl", "xapi"], default=None,
                   help="input format (default: from the file extension)")
    g.add_argument("--delimiter", default=None, help="CSV delimiter (default: sniffed)")
    g.add_argument("--encoding", default="utf-8", help="text encoding (default: utf-8)")
    g.add_argument("--keep-duplicates", action="store_true",
                   help="keep exact duplicate events instead of rejecting them")
    g.add_argument("--max-bytes", type=float, default=20e9,
                   help="refuse event files larger than this many bytes (default: 2e10)")


def add_outcome_options(p, required=True):
    g = p.add_argument_group("outcomes and groups")
    g.add_argument("--outcomes", required=required, metavar="FILE",
                   help="CSV with learner,pre,post,max (gain) or learner,score or learner,label")
    g.add_argument("--outcome-learner-column", default=None, metavar="NAME")
    g.add_argument("--pre-column", default=None, metavar="NAME")
    g.add_argument("--post-column", default=None, metavar="NAME")
    g.add_argument("--max-column", default=None, metavar="NAME")
    g.add_argument("--score-column", default=None, metavar="NAME")
    g.add_argument("--label-column", default=None, metavar="NAME")
    g.add_argument("--max-score", type=float, default=None,
                   help="maximum score when the outcomes have no max column")
    g.add_argument("--grouping", choices=["median", "fraction", "thresholds", "label"],
                   default=None, help="how groups are formed (default: median split on the "
                   "gain or score; label when the outcomes have a label column)")
    g.add_argument("--group-fraction", type=float, default=1 / 3,
                   help="top/bottom share for --grouping fraction (default: 1/3)")
    g.add_argument("--low", type=float, default=None, help="below this: weak (thresholds rule)")
    g.add_argument("--high", type=float, default=None, help="at or above this: strong (thresholds rule)")


def add_encoding_options(p):
    g = p.add_argument_group("encoding")
    g.add_argument("--template", default="{action}",
                   help="symbol template, e.g. '{action}' or '{action}:{target}'")
    g.add_argument("--mapping", default=None, metavar="FILE",
                   help="CSV action,symbol to rename/merge (same symbol) or drop (empty symbol)")
    g.add_argument("--collapse-repeats", action="store_true", help="merge immediate repeats")
    g.add_argument("--pause-strategy", choices=["quantile", "fixed", "learner_quantile", "none"],
                   default="quantile", help="how pause bins are set (default: quantile)")
    g.add_argument("--pause-bins", type=int, default=3, help="number of pause bins (default: 3)")
    g.add_argument("--pause-thresholds", default=None, metavar="S1,S2",
                   help="bin edges in seconds for --pause-strategy fixed")
    g.add_argument("--implicit-pauses", default="shortest", metavar="LABELS",
                   help="pause bins that emit no token: labels such as short,medium, or "
                        "'shortest' for the first bin (default: shortest; '' for none)")
    g.add_argument("--unit", choices=["learner", "session"], default="learner",
                   help="one sequence per learner or per session (default: learner)")
    g.add_argument("--session-gap", type=float, default=None,
                   help="with --unit session: a gap longer than this (s) starts a new session")


def events_from_args(args, path):
    from ...inputs.load import load_events
    columns = {role: getattr(args, f"{role}_column") for role in EVENT_ROLES}
    return load_events(path, columns=columns, format=args.format, delimiter=args.delimiter,
                       encoding=args.encoding,
                       duplicates="keep" if args.keep_duplicates else "reject",
                       max_bytes=args.max_bytes)


def outcomes_from_args(args):
    from ...inputs.outcomes import load_outcomes
    cols = {"learner": args.outcome_learner_column, "pre": args.pre_column,
            "post": args.post_column, "max": args.max_column, "score": args.score_column,
            "label": args.label_column}
    return load_outcomes(args.outcomes, columns=cols, max_score=args.max_score)


def grouping_from_args(args, outcomes):
    from ...inputs.outcomes import Grouping
    rule = args.grouping or ("label" if outcomes.attrs.get("outcome_kind") == "label" else "median")
    return Grouping(rule, fraction=args.group_fraction, low=args.low, high=args.high)


def encoder_from_args(args):
    from ...encoding.encoder import encoder_from_settings
    return encoder_from_settings({
        "template": args.template, "mapping": args.mapping,
        "collapse_repeats": args.collapse_repeats, "pause_strategy": args.pause_strategy,
        "pause_bins": args.pause_bins,
        "pause_thresholds": parse_float_list(args.pause_thresholds, "--pause-thresholds"),
        "implicit_pauses": [x.strip() for x in (args.implicit_pauses or "").split(",")
                            if x.strip()],
        "unit": args.unit, "session_gap": args.session_gap})


def add_privacy_option(p):
    p.add_argument("--pseudonymize", metavar="KEY_FILE", default=None,
                   help="replace learner identifiers in every output by a keyed hash "
                        "(HMAC-SHA256; the same key gives the same pseudonyms as analyze)")


def pseudonymize_inputs(args, loaded, outcomes):
    """Events and outcomes with learner identifiers replaced, when --pseudonymize is given.

    Done right after loading (as ``seqmine analyze`` does), so no output sees a raw id.
    """
    key_path = getattr(args, "pseudonymize", None)
    if not key_path:
        return loaded, outcomes
    from ...inputs.privacy import read_key
    from ...pipeline import pseudonymize_inputs as replace
    return replace(loaded, outcomes, read_key(key_path))


def print_warnings(records):
    """Each warning a run recorded, once, as one line on standard error (also when quiet:
    a warning says what the run assumed, which scripts need to know too)."""
    for w in records:
        print(f"seqmine: warning [{w.code}]: {w.message}", file=sys.stderr)
