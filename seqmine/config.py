"""Run configuration: defaults, TOML files and command-line overrides.

Every option of ``seqmine analyze`` lives in one nested dictionary with a section per
stage. A TOML file (``--config FILE``) overrides the defaults; command-line flags
override the file. The effective configuration is written to ``summary.json``.
Configuration files are parsed as data (TOML), never executed.
"""

from __future__ import annotations

import copy
import difflib
import math
import numbers
from pathlib import Path

from ._util.checks import check_jobs
from .errors import DataFileError, ParameterError

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = ["DEFAULT_CONFIG", "load_config", "merge_config", "default_config", "default_value",
           "EVENT_ROLES", "CONTRAST_CORRECTIONS", "CLASSIFIERS", "DEFAULT_FRACTIONS",
           "NONE_ALLOWED", "check_config", "OPTION_RULES", "MAX_SEED"]

# ---- option vocabularies: kept here (no heavy imports) so the command line can offer
# them as choices without importing pandas, scipy or scikit-learn

#: Event-log column roles and whether each is required.
EVENT_ROLES = {"learner": True, "time": True, "action": True,
               "session": False, "target": False, "channel": False}

#: Multiple-comparison corrections of the contrast table.
CONTRAST_CORRECTIONS = ("bh", "holm", "westfall-young")

#: Early-prediction classifier name -> featurizers whose columns it uses (``()`` = majority).
CLASSIFIERS = {
    "pattern": ("pattern",),
    "hmm": ("hmm",),
    "frequency_pause": ("frequency_pause",),
    "fusion": ("pattern", "hmm", "frequency_pause"),
    "majority": (),
}

#: Defaults of every option, by section: the one source of defaults. The Python API
#: (``mine``, ``contrast``, ``fit_phases``, ``validate``, ``Encoder``, ...), every
#: sub-command's flags and ``analyze`` take theirs from here (a test checks that they
#: agree). Keys are the Python parameter names; ``seed`` is the command-line and file
#: name of the API's ``random_state``. ``None`` means "not set / automatic / no limit"
#: (written ``"none"`` in a TOML file).
DEFAULT_CONFIG = {
    "seed": 20261202,
    "n_jobs": 1,
    "scheduler": None,
    "events": {
        "learner_column": "learner", "time_column": "time", "action_column": "action",
        "session_column": "session", "target_column": "target", "channel_column": "channel",
        "format": None, "delimiter": None, "encoding": "utf-8", "duplicates": "reject",
        "max_bytes": 20_000_000_000, "time_unit": "auto", "timezone": None,
        "decimal_comma": False,
    },
    "outcomes": {
        "learner_column": "learner", "pre_column": "pre", "post_column": "post",
        "max_column": "max", "score_column": "score", "label_column": "label",
        "max_score": None, "grouping": None, "fraction": 1 / 3, "low": None, "high": None,
        "match_ids": "exact",
    },
    "encode": {
        "template": "{action}", "mapping": None, "collapse_repeats": False,
        "pause_strategy": "quantile", "pause_bins": 3, "pause_thresholds": None,
        "implicit_pauses": ["shortest"], "unit": "session", "session_gap": 1800.0,
    },
    "mine": {
        "min_support": 0.2, "min_length": 2, "max_length": 4, "max_gap": 0,
        "max_window": None, "skip_pauses": True, "start_with_action": True,
        "end_with_action": False, "closed": False, "maximal": False,
        "max_patterns": 200_000, "support_unit": "sequence",
    },
    "contrast": {
        "correction": "bh", "alpha": 0.05, "n_permutations": 1000,
        "n_bootstrap": 100, "n_replication_splits": 20, "n_volume_strata": None,
        "redundancy": 0.9, "unit": "learner",
    },
    "transitions": {"exclude_pauses": False},
    "phases": {"enabled": True, "min_states": 2, "max_states": 5, "n_restarts": 3,
               "n_iter": 500, "tol": 0.01, "criterion": "bic", "n_splits": 3,
               "all_splits": False, "n_permutations": 0, "max_sequences": None},
    "validate": {"enabled": True, "n_splits": 5, "n_repeats": 3, "n_repeats_hmm": 1,
                 "fractions": [0.1, 0.25, 0.5, 0.75, 1.0], "n_bootstrap": 500,
                 "top_k": 30, "hmm": {}, "max_learners": None},
    "detectors": {"max_q": 0.05, "min_effect": 0.2, "effect": "cohens_h",
                  "min_stability": 0.5, "max_detectors": 20,
                  "evidence": ["order", "presence"], "encourage_share": 0.5,
                  "absence_quantile": 0.75, "examples": True},
    "report": {"examples": True, "max_patterns": 15, "explorer_rows": 5000},
    "privacy": {"pseudonymize_key": None},
}


#: Observed fractions of each held-out sequence used by default in ``validate``.
DEFAULT_FRACTIONS = tuple(DEFAULT_CONFIG["validate"]["fractions"])


def default_config():
    """A deep copy of :data:`DEFAULT_CONFIG`."""
    return copy.deepcopy(DEFAULT_CONFIG)


def default_value(section, key=None):
    """The default of one option (a copy), as API signatures and flags use it.

    Examples
    --------
    >>> default_value("mine", "min_support")
    0.2
    >>> default_value("seed")
    20261202
    """
    value = DEFAULT_CONFIG[section] if key is None else DEFAULT_CONFIG[section][key]
    return copy.deepcopy(value)


def load_config(path):
    """Read a TOML configuration file and merge it over the defaults.

    Unknown sections or keys are errors that name the closest valid key.
    """
    path = Path(path)
    if not path.is_file():
        raise DataFileError(f"{path}: configuration file not found; check the path.")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except UnicodeDecodeError:
        raise DataFileError(f"{path}: not valid UTF-8 text; re-save the configuration as UTF-8.") from None
    except tomllib.TOMLDecodeError as exc:
        raise DataFileError(f"{path}: not valid TOML ({exc}); fix the line it names.") from None
    return merge_config(default_config(), data, source=str(path))


#: Options that take ``"none"`` (no limit / switched off) besides a number, though their
#: default is a number; a negative number is refused with a pointer to ``"none"``.
NONE_ALLOWED = {("mine", "max_gap"), ("mine", "max_length"), ("mine", "max_window"),
                ("encode", "session_gap"),
                ("contrast", "redundancy"), ("detectors", "max_detectors")}


def merge_config(base, overrides, source="configuration"):
    """Merge ``overrides`` into a copy of ``base``, rejecting unknown keys.

    The string ``"none"`` (any case) stands for ``None`` (TOML has no null) in options
    whose default is ``None`` or that are listed in :data:`NONE_ALLOWED`.
    """
    out = copy.deepcopy(base)
    for key, value in (overrides or {}).items():
        if key not in out:
            raise ParameterError(_unknown(source, key, list(out)))
        if isinstance(out[key], dict):
            if not isinstance(value, dict):
                raise ParameterError(f"{source}: [{key}] must be a table of options, e.g. [{key}].")
            for sub, v in value.items():
                if sub not in out[key]:
                    raise ParameterError(_unknown(source, f"{key}.{sub}",
                                                  [f"{key}.{k}" for k in out[key]]))
                out[key][sub] = _check_value(source, key, sub, v)
        else:
            value = _check_value(source, None, key, value)
            if key == "n_jobs":
                try:
                    check_jobs(value, key)
                except ParameterError as exc:
                    raise ParameterError(f"{source}: {exc}") from None
            out[key] = value
    return out


def _check_value(source, section, key, value):
    """``value`` of option ``section.key`` checked against its default's kind, with
    ``"none"`` read as None where allowed."""
    default = DEFAULT_CONFIG[key] if section is None else DEFAULT_CONFIG[section].get(key)
    name = key if section is None else f"{section}.{key}"
    optional = default is None or (section, key) in NONE_ALLOWED
    if optional and isinstance(value, str) and value.strip().lower() == "none":
        return None
    value = _check_type(source, name, default, value)
    if ((section, key) in NONE_ALLOWED and isinstance(value, (int, float))
            and not isinstance(value, bool) and value < 0):  # other kinds: check_config
        raise ParameterError(f"{source}: option '{name}' must be 0 or more, or \"none\" for "
                             f"no limit; got {value!r}.")
    return value


def _check_type(source, key, default, value):
    """The value, checked to have the kind of its default (options defaulting to None
    take any); a whole number written as a float (``max_bytes = 2e10``) becomes an int."""
    if default is None or value is None:
        return value
    if (isinstance(default, int) and not isinstance(default, bool) and isinstance(value, float)
            and value.is_integer()):
        value = int(value)
    if isinstance(default, bool):
        ok, kind = isinstance(value, bool), "true or false"
    elif isinstance(default, int):
        ok, kind = isinstance(value, int) and not isinstance(value, bool), "a whole number"
    elif isinstance(default, float):
        ok, kind = isinstance(value, (int, float)) and not isinstance(value, bool), "a number"
    elif isinstance(default, str):
        ok, kind = isinstance(value, str), "a string in quotes"
    elif isinstance(default, list):
        ok, kind = isinstance(value, list), "a list, e.g. [...]"
    else:
        return value
    if not ok:
        raise ParameterError(f"{source}: option '{key}' must be {kind}; got {value!r}.")
    return value


def _unknown(source, key, valid):
    close = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
    hint = f" Did you mean '{close[0]}'?" if close else ""
    return f"{source}: unknown option '{key}'.{hint}"


# ----------------------------------------------------------------- whole checks
#: Largest seed (numpy's legacy generators and scikit-learn take seeds below 2**32).
MAX_SEED = 2**32 - 1

_FORMATS = (None, "csv", "tsv", "parquet", "jsonl", "xapi")

#: The rule of every option, checked by :func:`check_config` before any stage runs:
#: (kind, arguments). Kinds: ``int`` (low, high, None allowed), ``num`` (low, high,
#: low exclusive, high exclusive, None allowed), ``bool``, ``str`` (None allowed),
#: ``choice`` (values), ``numbers`` (low, high, low exclusive, None allowed: a list),
#: ``strings`` (a list), ``evidence`` (kinds of evidence or "any"), ``support`` (a fraction in (0, 1] or a count >= 1), ``table``
#: (a table of options, checked by the stage that reads it).
OPTION_RULES = {
    "seed": ("int", (0, MAX_SEED, False)),
    "n_jobs": ("int", (-1, 4096, False)),
    "scheduler": ("str", (True,)),
    **{f"events.{r}_column": ("str", (False,)) for r in
       ("learner", "time", "action", "session", "target", "channel")},
    "events.format": ("choice", (_FORMATS,)),
    "events.delimiter": ("str", (True,)),
    "events.encoding": ("str", (False,)),
    "events.duplicates": ("choice", (("reject", "keep"),)),
    "events.max_bytes": ("int", (1, 2**63 - 1, False)),
    "events.time_unit": ("choice", (("auto", "s", "ms", "us"),)),
    "events.timezone": ("str", (True,)),
    "events.decimal_comma": ("bool", ()),
    **{f"outcomes.{r}_column": ("str", (False,)) for r in
       ("learner", "pre", "post", "max", "score", "label")},
    "outcomes.max_score": ("num", (0, None, True, False, True)),
    "outcomes.grouping": ("choice", ((None, "median", "fraction", "thresholds", "label"),)),
    "outcomes.match_ids": ("choice", (("exact", "numeric"),)),
    "outcomes.fraction": ("num", (0, 0.5, True, False, False)),
    "outcomes.low": ("num", (None, None, False, False, True)),
    "outcomes.high": ("num", (None, None, False, False, True)),
    "encode.template": ("str", (False,)),
    "encode.mapping": ("str", (True,)),
    "encode.collapse_repeats": ("bool", ()),
    "encode.pause_strategy": ("choice", (("quantile", "fixed", "learner_quantile", "none"),)),
    "encode.pause_bins": ("int", (1, 20, False)),
    "encode.pause_thresholds": ("numbers", (0, None, False, True)),
    "encode.implicit_pauses": ("strings", ()),
    "encode.unit": ("choice", (("learner", "session"),)),
    "encode.session_gap": ("num", (0, None, True, False, True)),
    "mine.min_support": ("support", ()),
    "mine.min_length": ("int", (1, 1000, False)),
    "mine.max_length": ("int", (1, 1000, True)),
    "mine.max_gap": ("int", (-1, 10**9, True)),
    "mine.max_window": ("int", (1, 10**9, True)),
    "mine.skip_pauses": ("bool", ()),
    "mine.start_with_action": ("bool", ()),
    "mine.end_with_action": ("bool", ()),
    "mine.closed": ("bool", ()),
    "mine.maximal": ("bool", ()),
    "mine.support_unit": ("choice", (("learner", "sequence"),)),
    "mine.max_patterns": ("int", (1, 10**9, False)),
    "contrast.correction": ("choice", (CONTRAST_CORRECTIONS,)),
    "contrast.alpha": ("num", (0, 1, True, True, False)),
    "contrast.n_permutations": ("int", (1, 10**7, False)),
    "contrast.n_bootstrap": ("int", (0, 10**6, False)),
    "contrast.redundancy": ("num", (0, 1, True, False, True)),
    "contrast.unit": ("choice", (("auto", "sequence", "learner"),)),
    "contrast.n_replication_splits": ("int", (0, 10**4, False)),
    "contrast.n_volume_strata": ("int", (1, 10**4, True)),
    "transitions.exclude_pauses": ("bool", ()),
    "phases.enabled": ("bool", ()),
    "phases.min_states": ("int", (1, 100, False)),
    "phases.max_states": ("int", (1, 100, False)),
    "phases.n_restarts": ("int", (1, 1000, False)),
    "phases.n_iter": ("int", (1, 10**6, False)),
    "phases.tol": ("num", (0, None, False, False, False)),
    "phases.criterion": ("choice", (("bic", "heldout"),)),
    "phases.n_splits": ("int", (0, 100, False)),
    "phases.all_splits": ("bool", ()),
    "phases.n_permutations": ("int", (0, 10**5, False)),
    "phases.max_sequences": ("int", (2, 10**9, True)),
    "validate.enabled": ("bool", ()),
    "validate.n_splits": ("int", (2, 1000, False)),
    "validate.n_repeats": ("int", (1, 1000, False)),
    "validate.n_repeats_hmm": ("int", (1, 1000, False)),
    "validate.fractions": ("numbers", (0, 1, True, False)),
    "validate.n_bootstrap": ("int", (1, 10**6, False)),
    "validate.top_k": ("int", (1, 10**6, False)),
    "validate.hmm": ("table", ()),
    "validate.max_learners": ("int", (2, 10**9, True)),
    "detectors.max_q": ("num", (0, 1, True, False, False)),
    "detectors.min_effect": ("num", (0, None, False, False, False)),
    "detectors.effect": ("str", (False,)),
    "detectors.min_stability": ("num", (0, 1, False, False, False)),
    "detectors.max_detectors": ("int", (1, 10**6, True)),
    "detectors.evidence": ("evidence", ()),
    "detectors.encourage_share": ("num", (0, 1, False, False, True)),
    "detectors.absence_quantile": ("num", (0, 1, True, False, True)),
    "detectors.examples": ("bool", ()),
    "report.examples": ("bool", ()),
    "report.max_patterns": ("int", (1, 10**4, False)),
    "report.explorer_rows": ("int", (1, 10**7, False)),
    "privacy.pseudonymize_key": ("str", (True,)),
}


def check_config(cfg, source="configuration"):
    """Check every option of ``cfg`` (types, ranges, rules between options) at once.

    Called before any stage runs, so a wrong value stops the run at once with one
    line naming the option, instead of after minutes of work.

    Returns
    -------
    dict
        ``cfg`` (whole numbers given as floats, such as ``max_bytes = 2e10``, become
        ints).

    Raises
    ------
    ParameterError

    Examples
    --------
    >>> cfg = default_config()
    >>> cfg["phases"].update(min_states=5, max_states=2)
    >>> check_config(cfg)
    Traceback (most recent call last):
    ...
    seqmine.errors.ParameterError: configuration: option 'phases.min_states' (5) is larger than 'phases.max_states' (2); the state counts tried run from min_states to max_states.
    """
    cfg = copy.deepcopy(cfg)
    for key, (kind, args) in OPTION_RULES.items():
        section, _, name = key.rpartition(".")
        holder = cfg.get(section) if section else cfg
        if not isinstance(holder, dict) or name not in holder:
            continue
        holder[name] = _RULE_CHECKS[kind](source, key, holder[name], *args)
    _cross_checks(cfg, source)
    return cfg


def _bad(source, key, value, what):
    shown = repr(value)
    if len(shown) > 60:
        shown = shown[:57] + "..."
    return ParameterError(f"{source}: option '{key}' must be {what}; got {shown}.")


def _is_number(v):
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _rule_int(source, key, v, low, high, none_ok):
    if v is None and none_ok:
        return None
    if _is_number(v) and not isinstance(v, numbers.Integral) and math.isfinite(v) \
            and float(v).is_integer():
        v = int(v)
    span = f"between {low} and {high}" + (" or empty" if none_ok else "")
    if not (isinstance(v, numbers.Integral) and not isinstance(v, bool) and low <= v <= high):
        raise _bad(source, key, v, f"a whole number {span}")
    return int(v)


def _rule_num(source, key, v, low, high, low_open, high_open, none_ok):
    if v is None and none_ok:
        return None
    ok = _is_number(v) and math.isfinite(float(v))
    if ok and low is not None:
        ok = v > low if low_open else v >= low
    if ok and high is not None:
        ok = v < high if high_open else v <= high
    if not ok:
        lo = "" if low is None else ("(" if low_open else "[") + f"{low:g}"
        hi = "" if high is None else f"{high:g}" + (")" if high_open else "]")
        span = (f" in {lo}, {hi}" if low is not None and high is not None
                else f" {'>' if low_open else '>='} {low:g}" if low is not None else "")
        raise _bad(source, key, v, f"a finite number{span}" + (" or empty" if none_ok else ""))
    return v


def _rule_bool(source, key, v):
    if not isinstance(v, bool):
        raise _bad(source, key, v, "true or false")
    return v


def _rule_str(source, key, v, none_ok):
    if v is None and none_ok:
        return None
    if not isinstance(v, str) or (not none_ok and not v):
        raise _bad(source, key, v, "a string in quotes" + (" (or left out)" if none_ok
                                                          else ", not empty"))
    return v


def _rule_choice(source, key, v, choices):
    if v not in choices or isinstance(v, bool):
        shown = ", ".join("empty" if c is None else repr(c) for c in choices)
        raise _bad(source, key, v, f"one of {shown}")
    return v


def _rule_numbers(source, key, v, low, high, low_open, none_ok=True):
    if v is None and key != "validate.fractions":
        return None
    if not isinstance(v, (list, tuple)) or (key == "validate.fractions" and not v):
        raise _bad(source, key, v, "a list of numbers, e.g. [0.25, 0.5, 1.0]")
    return [_rule_num(source, key, x, low, high, low_open, False, False) for x in v]


def _rule_strings(source, key, v):
    if not isinstance(v, (list, tuple)) or not all(isinstance(x, str) for x in v):
        raise _bad(source, key, v, "a list of strings, e.g. [\"shortest\"]")
    return list(v)


def _rule_evidence(source, key, v):
    """Kinds of evidence a detector may rest on: a list of order / presence / volume, or
    "any" (select on q_value alone)."""
    if v is None or v == "any":
        return v
    items = [v] if isinstance(v, str) else v
    if not isinstance(items, (list, tuple)) or not all(isinstance(x, str) for x in items):
        raise _bad(source, key, v, 'a list such as ["order", "presence"], or "any"')
    bad = [x for x in items if x not in ("order", "presence", "volume", "any")]
    if bad:
        raise ParameterError(f"{source}: option '{key}' lists {bad[0]!r}; use some of order, "
                             f"presence, volume, or 'any' to select on q_value alone.")
    return list(v) if not isinstance(v, str) else v


def _rule_support(source, key, v):
    if isinstance(v, numbers.Integral) and not isinstance(v, bool):
        if v >= 1:
            return int(v)
    elif _is_number(v) and math.isfinite(v) and 0 < v <= 1:
        return v
    raise _bad(source, key, v, "a fraction in (0, 1] such as 0.2, or a count of sequences >= 1")


def _rule_table(source, key, v):
    if v is None:
        return {}
    if not isinstance(v, dict):
        raise _bad(source, key, v, "a table of options")
    return v


_RULE_CHECKS = {"int": _rule_int, "num": _rule_num, "bool": _rule_bool, "str": _rule_str,
                "choice": _rule_choice, "numbers": _rule_numbers, "strings": _rule_strings,
                "support": _rule_support, "table": _rule_table,
                "evidence": _rule_evidence}


def _cross_checks(cfg, source):
    def get(key):
        section, _, name = key.rpartition(".")
        return (cfg.get(section) or {}).get(name) if section else cfg.get(key)

    def order(a, b, why):
        va, vb = get(a), get(b)
        if va is not None and vb is not None and va > vb:
            raise ParameterError(f"{source}: option '{a}' ({va}) is larger than '{b}' ({vb}); "
                                 f"{why}.")

    if get("n_jobs") == 0:
        raise ParameterError(f"{source}: option 'n_jobs' must be a positive whole number or "
                             f"-1 (all cores); got 0.")
    order("phases.min_states", "phases.max_states",
          "the state counts tried run from min_states to max_states")
    order("mine.min_length", "mine.max_length", "no pattern could be that long and that short")
    order("mine.min_length", "mine.max_window",
          "no pattern of min_length tokens fits in the window")
    order("outcomes.low", "outcomes.high", "learners below low are weak, at or above high "
                                           "strong")
    if get("outcomes.grouping") == "thresholds" and (get("outcomes.low") is None
                                                     or get("outcomes.high") is None):
        raise ParameterError(f"{source}: the thresholds grouping needs both 'outcomes.low' and "
                             f"'outcomes.high' (e.g. --low 0.3 --high 0.7).")
    if get("encode.pause_strategy") == "fixed" and not get("encode.pause_thresholds"):
        raise ParameterError(f"{source}: pause_strategy 'fixed' needs 'encode.pause_thresholds' "
                             f"(bin edges in seconds, e.g. --pause-thresholds 5,30).")
    edges = get("encode.pause_thresholds") or []
    if any(b <= a for a, b in zip(edges, edges[1:])):
        raise ParameterError(f"{source}: option 'encode.pause_thresholds' must be strictly "
                             f"ascending; got {edges}.")
