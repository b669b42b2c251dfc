"""Option groups shared by several sub-commands, and their conversion to API objects.

Every option that has a configuration key is declared with :func:`add_option`: its
default comes from :data:`seqmine.config.DEFAULT_CONFIG` (the one source of defaults)
and the action remembers the key, so ``seqmine analyze`` can map the flags given on
the command line back onto the configuration. The flag is the key with ``_`` written
as ``-`` and a leading ``n_`` dropped (``n_permutations`` -> ``--permutations``);
the few exceptions are listed in :data:`FLAG_EXCEPTIONS`. "No limit" is written
``none`` wherever an option has one.
"""

from __future__ import annotations

import argparse
import sys

from ...config import CONTRAST_CORRECTIONS, DEFAULT_CONFIG, EVENT_ROLES
from ...errors import OptionValueError

__all__ = ["add_option", "flag_for", "FLAG_EXCEPTIONS", "add_event_options",
           "add_outcome_options", "add_encoding_options", "add_mining_options",
           "add_contrast_options", "add_execution_options", "add_sequences_option",
           "events_from_args", "outcomes_from_args", "grouping_from_args",
           "encoder_from_args", "mining_params", "add_privacy_option",
           "pseudonymize_inputs", "print_warnings", "int_or_none", "float_or_none",
           "seconds_or_none", "evidence_list", "add_evidence_option",
           "support_value", "float_list", "label_list", "NONE_WORD", "shown"]

#: How "no limit" / "not set" is written on the command line and in TOML files.
NONE_WORD = "none"

#: Configuration keys whose flag is not :func:`flag_for` of the key: the reason is
#: clarity (two sections share a key name, or the key is a switch).
FLAG_EXCEPTIONS = {
    ("outcomes", "learner_column"): "--outcome-learner-column",  # --learner-column: events
    ("outcomes", "fraction"): "--group-fraction",  # beside validate's --fractions
    ("phases", "enabled"): "--no-phases",
    ("phases", "min_states"): "--states",          # one range, e.g. 2-5
    ("phases", "max_states"): "--states",
    ("validate", "enabled"): "--no-validate",
    ("validate", "hmm"): "--hmm-states",           # sets validate.hmm.n_states
    ("privacy", "pseudonymize_key"): "--pseudonymize",
    ("contrast", "unit"): "--contrast-unit",       # --unit: encode (sequences per session)
}



class OnOffAction(argparse.BooleanOptionalAction):
    """``--name`` / ``--no-name``, with our help text on every Python version (argparse
    before 3.12 appends its own "(default: ...)" note, which breaks once the default is
    suppressed so that only flags actually given override the configuration)."""

    def __init__(self, *args, help=None, **kwargs):
        super().__init__(*args, help=help, **kwargs)
        self.help = help

def flag_for(section, key):
    """The flag of a configuration key: ``("contrast", "n_permutations")`` ->
    ``"--permutations"`` (see :data:`FLAG_EXCEPTIONS`)."""
    if (section, key) in FLAG_EXCEPTIONS:
        return FLAG_EXCEPTIONS[(section, key)]
    name = key[2:] if key.startswith("n_") else key
    return "--" + name.replace("_", "-")


def config_default(section, key):
    """``DEFAULT_CONFIG[section][key]`` (``section=None``: a top-level key)."""
    return DEFAULT_CONFIG[key] if section is None else DEFAULT_CONFIG[section][key]


def shown(value):
    """A default as the command line writes it: ``none``, ``on``/``off``, ``a,b``."""
    if value is None:
        return NONE_WORD
    if isinstance(value, bool):
        return "on" if value else "off"
    if isinstance(value, (list, tuple)):
        return ",".join(shown(v) for v in value)
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def add_option(group, section, key, *, flag=None, to_config=None, help="", **kwargs):
    """Add the option of configuration key ``section.key`` (``section=None``: top level).

    The default is the configuration's (unless ``default=`` is given, e.g. a text form
    parsed by ``type``); ``{default}`` in ``help`` is replaced by it as the command line
    writes it. ``to_config`` converts the parsed value back to the configuration form.
    """
    value = config_default(section, key)
    kwargs.setdefault("default", value)
    text = help.replace("{default}", shown(value))
    action = group.add_argument(flag or flag_for(section, key), help=text, **kwargs)
    action.config_key = (section, key)
    action.to_config = to_config
    return action


# ----------------------------------------------------------------- value parsers
def seconds_or_none(text):
    """A positive number of seconds, or ``none`` (switched off)."""
    t = str(text).strip().lower()
    if t == NONE_WORD:
        return None
    try:
        value = float(t)
    except ValueError:
        value = float("nan")
    if not 0 < value < float("inf"):
        raise OptionValueError(
            f"expected a positive number of seconds (e.g. 1800) or 'none'; got {text!r}")
    return value


def int_or_none(text):
    """A whole number, or ``none`` (no limit)."""
    t = str(text).strip().lower()
    if t == NONE_WORD:
        return None
    try:
        return int(t)
    except ValueError:
        raise OptionValueError(
            f"expected a whole number or 'none' (no limit); got {text!r}") from None


def float_or_none(text):
    """A number, or ``none`` (switched off)."""
    t = str(text).strip().lower()
    if t == NONE_WORD:
        return None
    try:
        return float(t)
    except ValueError:
        raise OptionValueError(
            f"expected a number or 'none'; got {text!r}") from None


def support_value(text):
    """A fraction of a group's sequences ('0.2') or a count of sequences ('5')."""
    t = str(text).strip()
    try:
        if any(c in t for c in ".eE"):
            return float(t)
        return int(t)
    except ValueError:
        raise OptionValueError(
            f"expected a fraction in (0, 1] such as 0.2 or a count of sequences such as 5; "
            f"got {text!r}") from None


def float_list(text):
    """``"5,30"`` -> ``[5.0, 30.0]``; ``""`` or ``none`` -> None."""
    t = str(text).strip()
    if t == "" or t.lower() == NONE_WORD:
        return None
    try:
        return [float(x) for x in t.split(",") if x.strip()]
    except ValueError:
        raise OptionValueError(
            f"expected comma-separated numbers, e.g. 5,30; got {text!r}") from None


def evidence_list(text):
    """``"order,presence"`` -> ``["order", "presence"]``; ``any`` -> None (select on
    q_value alone)."""
    parts = [x.strip().lower() for x in str(text or "").split(",") if x.strip()]
    if parts == ["any"]:
        return None
    if not parts or any(x not in ("order", "presence", "volume") for x in parts):
        raise OptionValueError(
            f"expected a comma-separated list of order, presence, volume, or 'any'; "
            f"got {text!r}")
    return parts


def add_evidence_option(g):
    """``--evidence``: which findings may become detectors (``[detectors] evidence``)."""
    add_option(g, "detectors", "evidence", type=evidence_list, metavar="KINDS",
               default=shown(config_default("detectors", "evidence")),
               help="kinds of evidence a detector may rest on (the evidence column of "
                    "patterns.csv): comma-separated order, presence, volume, or 'any' to "
                    "select on q_value alone (default: {default}: only findings that "
                    "survive the volume adjustment)")


def label_list(text):
    """``"short,medium"`` -> ``["short", "medium"]``; ``""`` -> ``[]``."""
    return [x.strip() for x in str(text or "").split(",") if x.strip()]


# ----------------------------------------------------------------- option groups
def add_execution_options(p, *, scheduler=True):
    """``--seed``, ``--jobs`` (and ``--scheduler``)."""
    add_option(p, None, "seed", type=int, metavar="S",
               help="random seed (the random_state of the Python API; default: {default})")
    add_option(p, None, "n_jobs", type=int, metavar="N",
               help="parallel processes, -1 = all cores; results equal the serial run "
                    "(default: {default})")
    if scheduler:
        add_option(p, None, "scheduler", metavar="ADDRESS",
                   help="run the parallel parts on a Dask cluster: tcp://host:8786, or "
                        "'local' for a local cluster with --jobs workers (needs "
                        "pip install \"seqmine[distributed]\")")


def add_sequences_option(p, *, positional=True, required=True):
    """The sequence database folder written by 'seqmine encode' (``SEQUENCES_DIR`` or
    ``--sequences DIR``)."""
    text = "sequence database folder written by 'seqmine encode' (OUT/sequences)"
    if positional:
        p.add_argument("sequences", metavar="SEQUENCES_DIR", help=text)
    else:
        p.add_argument("--sequences", metavar="DIR", default=None, required=required,
                       help=text)


def add_event_options(p):
    g = p.add_argument_group("event log columns and format")
    for role in EVENT_ROLES:
        add_option(g, "events", f"{role}_column", metavar="NAME",
                   help=f"column holding the {role} (default: {{default}})")
    add_option(g, "events", "format", choices=["csv", "tsv", "parquet", "jsonl", "xapi"],
               help="input format (default: from the file extension)")
    add_option(g, "events", "delimiter", metavar="CHAR", help="CSV delimiter (default: sniffed)")
    add_option(g, "events", "encoding", metavar="NAME", help="text encoding (default: {default})")
    add_duplicates_option(g, what="exact duplicate events")
    add_option(g, "events", "max_bytes", type=_whole_number, metavar="N",
               help="refuse event files larger than this many bytes (default: {default})")
    add_option(g, "events", "time_unit", choices=["auto", "s", "ms", "us"],
               help="what a numeric time stands for; auto recognises milliseconds and "
                    "microseconds since 1970 and relative milliseconds, and says so "
                    "(default: {default})")
    add_option(g, "events", "timezone", metavar="NAME",
               help="IANA time zone of ISO 8601 times written without a zone, e.g. "
                    "Europe/Berlin (default: UTC)")
    add_option(g, "events", "decimal_comma", action=OnOffAction,
               help="numbers in the events and the outcomes are written with a decimal "
                    "comma, 12,5 (default: {default})")


def add_duplicates_option(g, *, what):
    add_option(g, "events", "duplicates", choices=["reject", "keep"],
               help=f"reject {what} (default) or keep them")


def _whole_number(text):
    try:
        value = float(text)
    except ValueError:
        value = None
    if value is None or not value.is_integer():
        raise OptionValueError(f"expected a whole number such as 2e10; got {text!r}")
    return int(value)


def add_outcome_options(p, required=True):
    g = p.add_argument_group("outcomes and groups")
    g.add_argument("--outcomes", required=required, metavar="FILE",
                   help="CSV with learner,pre,post,max (gain) or learner,score or learner,label")
    for role in ("learner", "pre", "post", "max", "score", "label"):
        add_option(g, "outcomes", f"{role}_column", metavar="NAME",
                   help=f"outcomes column holding the {role} (default: {{default}})")
    add_option(g, "outcomes", "max_score", type=float, metavar="X",
               help="maximum score when the outcomes have no max column")
    add_option(g, "outcomes", "grouping", choices=["median", "fraction", "thresholds", "label"],
               help="how groups are formed (default: median split on the gain or score; "
                    "label when the outcomes have a label column)")
    add_option(g, "outcomes", "fraction", type=float, metavar="F",
               help="top/bottom share for --grouping fraction (default: 1/3)")
    add_option(g, "outcomes", "low", type=float, metavar="X", help="below this: weak (thresholds rule)")
    add_option(g, "outcomes", "high", type=float, metavar="X",
               help="at or above this: strong (thresholds rule)")
    add_option(g, "outcomes", "match_ids", choices=["exact", "numeric"],
               help="how learner ids of the events and the outcomes match: exact text (ids "
                    "that almost match stop the run), or numeric (1, 01 and 1.0 are one "
                    "learner) (default: {default})")


def add_encoding_options(p):
    g = p.add_argument_group("encoding")
    add_option(g, "encode", "template", metavar="TEMPLATE",
               help="symbol template, e.g. '{action}' or '{action}:{target}' (default: "
                    "{default})")
    add_option(g, "encode", "mapping", metavar="FILE",
               help="CSV action,symbol to rename/merge (same symbol) or drop (empty symbol)")
    add_option(g, "encode", "collapse_repeats", action=OnOffAction,
               help="merge immediate repeats (default: {default})")
    add_option(g, "encode", "pause_strategy",
               choices=["quantile", "fixed", "learner_quantile", "none"],
               help="how pause bins are set (default: {default})")
    add_option(g, "encode", "pause_bins", type=int, metavar="N", help="number of pause bins (default: {default})")
    add_option(g, "encode", "pause_thresholds", type=float_list, metavar="S1,S2",
               help="bin edges in seconds for --pause-strategy fixed")
    add_option(g, "encode", "implicit_pauses", type=label_list, metavar="LABELS",
               default=shown(config_default("encode", "implicit_pauses")),
               help="pause bins that emit no token: labels such as short,medium, or "
                    "'shortest' for the first bin (default: {default}; '' for none)")
    add_option(g, "encode", "unit", choices=["learner", "session"],
               help="one sequence per session or per learner (default: {default})")
    add_option(g, "encode", "session_gap", type=seconds_or_none, metavar="S",
               help="with --unit session: more seconds without an action than this start a "
                    "new sequence, 'none' = only a change of the session column (default: "
                    "{default}, i.e. 30 minutes)")


def add_mining_options(p, title="mining"):
    """The options of :func:`seqmine.mining.miner.mine` (the ``[mine]`` section)."""
    g = p.add_argument_group(title)
    add_option(g, "mine", "min_support", type=support_value, metavar="S",
               help="share of a group's sequences (e.g. 0.2) or a count of sequences "
                    "(e.g. 5) a pattern must reach in at least one group; learners with "
                    "--support-unit learner (default: {default})")
    add_option(g, "mine", "support_unit", choices=["sequence", "learner"],
               help="what --min-support counts: sequences, or learners with the pattern in "
                    "any of their sequences (default: {default})")
    add_option(g, "mine", "min_length", type=int, metavar="N",
               help="shortest pattern reported (default: {default})")
    add_option(g, "mine", "max_length", type=int_or_none, metavar="N",
               help="longest pattern reported, or 'none' (default: {default})")
    add_option(g, "mine", "max_gap", type=int_or_none, metavar="N",
               help="most tokens between consecutive items, 0 = contiguous, 'none' = no "
                    "limit (default: {default})")
    add_option(g, "mine", "max_window", type=int_or_none, metavar="N",
               help="largest span of an occurrence in tokens, or 'none' (default: {default})")
    add_option(g, "mine", "skip_pauses", action=OnOffAction,
               help="pause tokens do not count toward gaps and windows, so 'a > b' also "
                    "matches a, pause, b (default: {default})")
    add_option(g, "mine", "start_with_action", action=OnOffAction,
               help="report only patterns whose first item is an action (default: {default})")
    add_option(g, "mine", "end_with_action", action=OnOffAction,
               help="report only patterns whose last item is an action (default: {default})")
    add_option(g, "mine", "closed", action=OnOffAction,
               help="drop patterns contained in a longer one with the same support in every "
                    "group (default: {default})")
    add_option(g, "mine", "maximal", action=OnOffAction,
               help="drop patterns contained in a longer reported pattern (default: {default})")
    add_option(g, "mine", "max_patterns", type=int, metavar="N",
               help="stop when more frequent patterns than N are found (default: {default})")
    return g


def mining_params(args):
    """The :func:`~seqmine.mining.miner.mine` keyword arguments of the parsed flags."""
    return {key: getattr(args, key) for key in DEFAULT_CONFIG["mine"] if hasattr(args, key)}


def add_contrast_options(p, title="pattern statistics"):
    """The options of :func:`seqmine.scoring.contrast.contrast` that have a
    configuration key (the ``[contrast]`` section)."""
    g = p.add_argument_group(title)
    add_option(g, "contrast", "correction", choices=CONTRAST_CORRECTIONS,
               help="multiple-comparison control of q_value (default: {default})")
    add_option(g, "contrast", "alpha", type=float, metavar="A",
               help="significance level: 'favours' is set when q <= A (default: {default})")
    add_option(g, "contrast", "n_permutations", type=int, metavar="N",
               help="label permutations for westfall-young (default: {default})")
    add_option(g, "contrast", "n_bootstrap", type=int, metavar="N",
               help="bootstrap resamples for the stability column, 0 = skip "
                    "(default: {default})")
    add_option(g, "contrast", "redundancy", type=float_or_none, metavar="J",
               help="Jaccard threshold for redundancy marks, or 'none' (default: {default})")
    add_option(g, "contrast", "n_replication_splits", type=int, metavar="N",
               help="random half splits behind the replication column, 0 = skip "
                    "(default: {default})")
    add_option(g, "contrast", "n_volume_strata", type=int_or_none, metavar="N",
               help="activity strata of the volume-adjusted and order tests, or 'none' for "
                    "about one per ten learners, 2 to 50 (default: {default})")
    add_option(g, "contrast", "unit", choices=["learner", "sequence"],
               help="unit of the tests: 'learner' counts each learner once (sessions "
                    "merged); 'sequence' treats every session as independent "
                    "(session-level tests, which overstate the evidence; default: {default})")
    return g


def events_from_args(args, path):
    from ...inputs.load import load_events
    columns = {role: getattr(args, f"{role}_column") for role in EVENT_ROLES}
    return load_events(path, columns=columns, format=args.format, delimiter=args.delimiter,
                       encoding=args.encoding, duplicates=args.duplicates,
                       max_bytes=args.max_bytes, time_unit=args.time_unit,
                       timezone=args.timezone, decimal_comma=args.decimal_comma)


def outcomes_from_args(args, path=None):
    from ...inputs.outcomes import load_outcomes
    cols = {"learner": args.outcome_learner_column, "pre": args.pre_column,
            "post": args.post_column, "max": args.max_column, "score": args.score_column,
            "label": args.label_column}
    return load_outcomes(args.outcomes if path is None else path, columns=cols,
                         max_score=args.max_score,
                         decimal_comma=getattr(args, "decimal_comma", False))


def grouping_from_args(args, outcomes):
    from ...inputs.outcomes import Grouping
    rule = args.grouping or ("label" if outcomes.attrs.get("outcome_kind") == "label" else "median")
    return Grouping(rule, fraction=args.group_fraction, low=args.low, high=args.high)


def encoder_from_args(args):
    from ...encoding.encoder import encoder_from_settings
    return encoder_from_settings({key: getattr(args, key) for key in DEFAULT_CONFIG["encode"]})


def add_privacy_option(p):
    add_option(p, "privacy", "pseudonymize_key", metavar="KEY_FILE",
               help="replace learner identifiers in every output by a keyed hash "
                    "(HMAC-SHA256; the same key gives the same pseudonyms in every command)")


def pseudonymize_inputs(args, loaded, outcomes):
    """Events and outcomes with learner ids matched (--match-ids) and replaced by keyed
    hashes when --pseudonymize is given.

    Done right after loading (as ``seqmine analyze`` does), so no output sees a raw id.
    """
    from ...pipeline import reconcile_inputs
    key_path = getattr(args, "pseudonymize", None)
    key = None
    if key_path:
        from ...inputs.privacy import read_key
        key = read_key(key_path)
    return reconcile_inputs(loaded, outcomes, match_ids=getattr(args, "match_ids", "exact"),
                            key=key)


def print_warnings(frame):
    """Each warning a run recorded (``AnalysisResult.warnings``), once, as one line on
    standard error (also when quiet: a warning says what the run assumed, which scripts
    need to know too)."""
    for code, message in zip(frame["code"], frame["message"]):
        print(f"seqmine: warning [{code}]: {message}", file=sys.stderr)
