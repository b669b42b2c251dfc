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

__all__ = ["DEFAULT_CONFIG", "load_config", "merge_config", "default_config", "EVENT_ROLES",
           "CONTRAST_CORRECTIONS", "CLASSIFIERS", "DEFAULT_FRACTIONS"]

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

#: Observed fractions of each held-out sequence used by default in ``validate``.
DEFAULT_FRACTIONS = (0.1, 0.2, 0.25, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0)

#: Defaults of every option, by section. ``None`` means "not set / automatic".
DEFAULT_CONFIG = {
    "seed": 20261202,
    "jobs": 1,
    "scheduler": None,
    "events": {
        "learner_column": "learner", "time_column": "time", "action_column": "action",
        "session_column": "session", "target_column": "target", "channel_column": "channel",
        "format": None, "delimiter": None, "encoding": "utf-8", "duplicates": "reject",
        "max_bytes": 20_000_000_000,
    },
    "outcomes": {
        "learner_column": "learner", "pre_column": "pre", "post_column": "post",
        "max_column": "max", "score_column": "score", "label_column": "label",
        "max_score": None, "grouping": None, "fraction": 1 / 3, "low": None, "high": None,
    },
    "encode": {
        "template": "{action}", "mapping": None, "collapse_repeats": False,
        "pause_strategy": "quantile", "pause_bins": 3, "pause_thresholds": None,
        "implicit_pauses": ["shortest"], "unit": "learner", "session_gap": None,
    },
    "mine": {
        "min_support": 0.2, "min_length": 2, "max_length": 4, "max_gap": 0,
        "max_window": None, "skip_pauses": True, "start_with_action": True,
        "end_with_action": False, "closed": False, "maximal": False,
        "max_patterns": 200_000,
    },
    "contrast": {
        "correction": "bh", "alpha": 0.05, "n_permutations": 1000,
        "stability_resamples": 100, "redundancy_jaccard": 0.9,
    },
    "transitions": {"include_pauses": True},
    "phases": {"enabled": True, "min_states": 2, "max_states": 5, "restarts": 3,
               "max_iter": 100, "criterion": "bic", "heldout_folds": 3,
               "permutations": 19, "max_sequences": None},
    "validate": {"enabled": True, "folds": 5, "repeats": 3, "hmm_repeats": 1,
                 "fractions": [0.1, 0.25, 0.5, 0.75, 1.0], "bootstrap": 500,
                 "top_patterns": 30, "hmm": {}, "max_learners": None},
    "detectors": {"max_q": 0.05, "min_stability": 0.5, "max_detectors": 20,
                  "encourage_share": 0.5, "absence_quantile": 0.75, "examples": True},
    "report": {"examples": True, "top_patterns": 15, "explorer_rows": 5000},
    "privacy": {"pseudonymize_key": None},
}


def default_config():
    """A deep copy of :data:`DEFAULT_CONFIG`."""
    return copy.deepcopy(DEFAULT_CONFIG)


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


def merge_config(base, overrides, source="configuration"):
    """Merge ``overrides`` into a copy of ``base``, rejecting unknown keys."""
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
                out[key][sub] = _check_type(source, f"{key}.{sub}", DEFAULT_CONFIG[key].get(sub), v)
        else:
            value = _check_type(source, key, DEFAULT_CONFIG.get(key), value)
            if key == "jobs":
                try:
                    check_jobs(value, key)
                except ParameterError as exc:
                    raise ParameterError(f"{source}: {exc}") from None
            out[key] = value
    return out


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
