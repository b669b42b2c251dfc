"""Run configuration: defaults, TOML files and command-line overrides.

Every option of ``seqmine analyze`` lives in one nested dictionary with a section per
stage. A TOML file (``--config FILE``) overrides the defaults; command-line flags
override the file. The effective configuration is written to ``summary.json``.
Configuration files are parsed as data (TOML), never executed.
"""

from __future__ import annotations

import copy
import difflib
from pathlib import Path

from ._util.checks import check_jobs
from .errors import DataFileError, ParameterError

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = ["DEFAULT_CONFIG", "load_config", "merge_config", "default_config", "default_value",
           "EVENT_ROLES", "CONTRAST_CORRECTIONS", "CLASSIFIERS", "DEFAULT_FRACTIONS",
           "NONE_ALLOWED"]

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
        "max_patterns": 200_000,
    },
    "contrast": {
        "correction": "bh", "alpha": 0.05, "n_permutations": 1000,
        "n_bootstrap": 100, "n_replication_splits": 20, "n_volume_strata": None,
        "redundancy": 0.9, "unit": "learner",
    },
    "transitions": {"exclude_pauses": False},
    "phases": {"enabled": True, "min_states": 2, "max_states": 5, "n_restarts": 3,
               "n_iter": 100, "criterion": "bic", "n_splits": 3,
               "n_permutations": 19, "max_sequences": None},
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
    if (section, key) in NONE_ALLOWED and value is not None and value < 0:
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
