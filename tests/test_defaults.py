"""One source of defaults: the Python API, every sub-command and the configuration agree.

``seqmine.config.DEFAULT_CONFIG`` holds every default. This test walks the signatures
of the public API, the parsers of every sub-command and the configuration, and fails
when a default disagrees, when an option is spelled differently in two commands, or
when a public signature uses a name outside the scikit-learn conventions.
"""

import argparse
import importlib
import inspect
import pkgutil

import pytest

import seqmine
from seqmine.cli.commands._options import FLAG_EXCEPTIONS, flag_for
from seqmine.cli.main import build_parser
from seqmine.config import DEFAULT_CONFIG, default_config

M, C, V, P = "mine", "contrast", "validate", "phases"

#: [detectors] keys used when the file is built (direction balance, absence rules,
#: examples), not by the row selection alone.
_EXPORT_ONLY = {"encourage_share", "absence_quantile", "examples"}

#: (object, parameter, configuration section, key); the API default must equal the
#: configuration's (tuples compare as lists, a range as [min_states, max_states]).
API_DEFAULTS = [
    *[("mining.miner.mine", k, M, k) for k in DEFAULT_CONFIG[M]],
    *[("mining.partitions.mine_parallel", k, M, k) for k in
      ("min_support", "min_length", "max_length", "closed", "maximal", "end_with_action",
       "max_patterns")],
    *[("mining.miner.match", k, M, k) for k in ("max_gap", "max_window", "skip_pauses")],
    *[("reporting.examples.build_examples", k, M, k) for k in
      ("max_gap", "max_window", "skip_pauses")],
    *[("validation.features.PatternFeaturizer", k, M, k) for k in DEFAULT_CONFIG[M]
      if k != "max_patterns"],          # None there: the miner's default
    *[("validation.features.PatternFeaturizer", k, C, k) for k in
      ("correction", "alpha", "n_permutations")],
    ("validation.features.PatternFeaturizer", "top_k", V, "top_k"),
    ("validation.features.select_patterns", "top_k", V, "top_k"),
    ("validation.features.select_patterns", "alpha", C, "alpha"),
    *[("scoring.contrast.contrast", k, C, k) for k in DEFAULT_CONFIG[C]],
    ("scoring.permutation.westfall_young_minp", "n_permutations", C, "n_permutations"),
    ("scoring.permutation.westfall_young_rates", "n_permutations", C, "n_permutations"),
    ("scoring.permutation.bootstrap_significance", "n_bootstrap", C, "n_bootstrap"),
    ("scoring.permutation.bootstrap_significance", "alpha", C, "alpha"),
    ("scoring.transitions.transitions", "exclude_pauses", "transitions", "exclude_pauses"),
    ("scoring.transitions.transition_counts", "exclude_pauses", "transitions",
     "exclude_pauses"),
    *[("phases.run.fit_phases", k, P, k) for k in
      ("n_restarts", "n_iter", "tol", "criterion", "n_splits", "all_splits", "n_permutations")],
    ("phases.run.fit_phases", "n_states", P, ("min_states", "max_states")),
    ("phases.run.fit_phases", "alpha", C, "alpha"),
    *[("phases.fitting.select_n_states", k, P, k) for k in
      ("n_restarts", "n_iter", "tol", "n_splits", "all_splits")],
    ("phases.fitting.select_n_states", "n_states", P, ("min_states", "max_states")),
    *[("phases.fitting.fit_phase_model", k, P, k) for k in ("n_restarts", "n_iter", "tol")],
    *[("phases.classify.GroupHMMClassifier", k, P, k) for k in ("n_restarts", "n_iter", "tol")],
    *[("validation.crossval.validate", k, V, k) for k in ("n_splits", "n_repeats",
                                                           "n_repeats_hmm", "fractions",
                                                           "n_bootstrap")],
    ("validation.crossval.validate", "alpha", C, "alpha"),
    ("validation.crossval.learner_splits", "n_splits", V, "n_splits"),
    ("validation.metrics.early_prediction_table", "n_bootstrap", V, "n_bootstrap"),
    ("validation.metrics.early_prediction_table", "alpha", C, "alpha"),
    *[("detection.detectors.export_detectors", k, "detectors", k)
      for k in DEFAULT_CONFIG["detectors"]],
    *[("detection.detectors.select_detectors", k, "detectors", k)
      for k in DEFAULT_CONFIG["detectors"] if k not in _EXPORT_ONLY],
    *[("encoding.encoder.Encoder", k, "encode", k) for k in DEFAULT_CONFIG["encode"]],
    *[("inputs.load.load_events", k, "events", k) for k in
      ("format", "delimiter", "encoding", "duplicates", "max_bytes", "time_unit", "timezone",
       "decimal_comma")],
    ("inputs.outcomes.load_outcomes", "decimal_comma", "events", "decimal_comma"),
    ("inputs.outcomes.reconcile_learner_ids", "match_ids", "outcomes", "match_ids"),
    ("pipeline.reconcile_inputs", "match_ids", "outcomes", "match_ids"),
    *[("inputs.outcomes.Grouping", k, "outcomes", k) for k in ("fraction", "low", "high")],
    *[("reporting.render.render_report", k, "report", k) for k in ("examples", "max_patterns",
                                                                    "explorer_rows")],
]

#: Names a public signature must not use (scikit-learn conventions; one name per idea).
FORBIDDEN = {"seed": "random_state", "jobs": "n_jobs", "folds": "n_splits",
             "n_folds": "n_splits", "stability_resamples": "n_bootstrap",
             "bootstrap": "n_bootstrap", "n_resamples": "n_bootstrap",
             "restarts": "n_restarts", "permutations": "n_permutations"}

#: Parameters named like a count that are something else.
NOT_COUNTS = {("seqmine.validation.crossval.ValidationResult", "folds")}  # the fold table

#: Spellings that were replaced (one spelling per option across commands).
OLD_FLAGS = {"--seqdb", "--stability-resamples", "--folds", "--count-pauses",
             "--keep-duplicates", "--n-jobs", "--random-state"}


def _obj(path):
    module, name = path.rsplit(".", 1)
    return getattr(importlib.import_module(f"seqmine.{module}"), name)


def _signature(obj):
    return inspect.signature(obj.__init__ if inspect.isclass(obj) else obj)


def _config(section, key):
    if isinstance(key, tuple):
        return list(range(DEFAULT_CONFIG[section][key[0]], DEFAULT_CONFIG[section][key[1]] + 1))
    return DEFAULT_CONFIG[section][key]


def _plain(value):
    return list(value) if isinstance(value, (tuple, range)) else value


@pytest.mark.parametrize("path, param, section, key", API_DEFAULTS,
                         ids=[f"{p}:{n}" for p, n, _, _ in API_DEFAULTS])
def test_api_defaults_come_from_the_configuration(path, param, section, key):
    sig = _signature(_obj(path))
    assert param in sig.parameters, f"{path} has no parameter {param!r}"
    got = _plain(sig.parameters[param].default)
    want = _config(section, key)
    assert got == want and type(got) is type(want), \
        f"{path}({param}={got!r}) but the configuration says {section}.{key} = {want!r}"


def _public_callables():
    """(qualified name, callable) of every public function, class and public method."""
    seen = set()
    for info in pkgutil.walk_packages(seqmine.__path__, "seqmine."):
        if ".cli" in info.name or any(part.startswith("_") for part in info.name.split(".")):
            continue
        mod = importlib.import_module(info.name)
        for name in getattr(mod, "__all__", []):
            obj = getattr(mod, name, None)
            if not callable(obj) or id(obj) in seen or getattr(obj, "__module__", "") != mod.__name__:
                continue
            seen.add(id(obj))
            if inspect.isclass(obj):
                if issubclass(obj, BaseException):
                    continue
                yield f"{mod.__name__}.{name}", obj.__init__
                for meth, fn in vars(obj).items():
                    if callable(fn) and not meth.startswith("_"):
                        yield f"{mod.__name__}.{name}.{meth}", fn
            else:
                yield f"{mod.__name__}.{name}", obj
    for name in seqmine.__all__:  # the top-level names, wherever they are defined
        obj = getattr(seqmine, name)
        if callable(obj) and id(obj) not in seen and not (
                inspect.isclass(obj) and issubclass(obj, BaseException)):
            seen.add(id(obj))
            yield f"seqmine.{name}", obj.__init__ if inspect.isclass(obj) else obj


PUBLIC = sorted(_public_callables(), key=lambda t: t[0])


def test_the_walk_sees_the_public_api():
    names = {n.rsplit(".", 1)[-1] for n, _ in PUBLIC}
    assert {"mine", "contrast", "fit_phases", "validate", "export_detectors", "analyze",
            "Encoder", "PatternFeaturizer", "AnalysisResult"} <= names and len(PUBLIC) > 80


@pytest.mark.parametrize("name, fn", PUBLIC, ids=[n for n, _ in PUBLIC])
def test_public_signatures_follow_the_naming_conventions(name, fn):
    try:
        params = inspect.signature(fn).parameters
    except (TypeError, ValueError):  # builtins without a signature
        return
    for p, spec in params.items():
        assert p not in FORBIDDEN or (name, p) in NOT_COUNTS, \
            f"{name}: parameter {p!r}; use {FORBIDDEN[p]!r}"
        assert not p.startswith("_"), f"{name}: private parameter {p!r} in a public signature"
        if p == "random_state" and spec.default is not inspect.Parameter.empty:
            assert spec.default == DEFAULT_CONFIG["seed"], f"{name}: random_state default"
        if p == "n_jobs" and spec.default is not inspect.Parameter.empty:
            assert spec.default == DEFAULT_CONFIG["n_jobs"], f"{name}: n_jobs default"


# ------------------------------------------------------------------ command line
#: The least each command needs to parse.
REQUIRED = {
    "demo": [], "analyze": ["e.csv", "--outcomes", "o.csv", "--out", "o"],
    "encode": ["e.csv", "--outcomes", "o.csv", "--out", "o"],
    "mine": ["seq", "--out", "o"], "contrast": ["pat", "--out", "o.csv"],
    "phases": ["seq", "--out", "o"],
    "validate": ["e.csv", "--outcomes", "o.csv", "--out", "o"],
    "detectors": ["p.csv", "--sequences", "seq", "--out", "d.json"],
    "watch": ["d.json"], "report": ["o"], "keygen": ["k.key"],
}


def _commands():
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return parser, sub.choices


def test_every_command_is_covered():
    _, commands = _commands()
    assert set(commands) == set(REQUIRED)


def _config_actions():
    _, commands = _commands()
    for cmd, p in sorted(commands.items()):
        for a in p._actions:
            if hasattr(a, "config_key"):
                yield cmd, a


CONFIG_ACTIONS = list(_config_actions())


def test_the_commands_declare_their_configuration_options():
    keyed = {(cmd, a.config_key) for cmd, a in CONFIG_ACTIONS}
    for cmd, key in [("mine", ("mine", "min_support")), ("analyze", ("mine", "max_gap")),
                     ("validate", ("mine", "skip_pauses")), ("contrast", (None, "seed")),
                     ("phases", ("phases", "n_restarts")), ("detectors", ("detectors", "max_q")),
                     ("report", ("report", "max_patterns")), ("watch", ("events", "duplicates"))]:
        assert (cmd, key) in keyed


@pytest.mark.parametrize("cmd, action", CONFIG_ACTIONS,
                         ids=[f"{c} {a.option_strings[0]}" for c, a in CONFIG_ACTIONS])
def test_flag_is_named_after_its_configuration_key(cmd, action):
    section, key = action.config_key
    assert action.option_strings[0] == flag_for(section, key)
    if (section, key) not in FLAG_EXCEPTIONS:
        name = key[2:] if key.startswith("n_") else key
        assert action.option_strings[0] == "--" + name.replace("_", "-")


@pytest.mark.parametrize("cmd, action", [(c, a) for c, a in CONFIG_ACTIONS if c != "analyze"],
                         ids=[f"{c} {a.option_strings[0]}" for c, a in CONFIG_ACTIONS
                              if c != "analyze"])
def test_command_defaults_are_the_configuration(cmd, action):
    _, commands = _commands()
    args = commands[cmd].parse_args(REQUIRED[cmd])
    value = getattr(args, action.dest)
    if action.to_config:
        value = action.to_config(value)
    section, key = action.config_key
    want = DEFAULT_CONFIG[key] if section is None else DEFAULT_CONFIG[section][key]
    assert _plain(value) == want, f"seqmine {cmd} {action.option_strings[0]}: {value!r} != {want!r}"


def test_analyze_without_flags_is_the_default_configuration():
    from seqmine.cli.commands.analyze import config_from_args
    parser, _ = _commands()
    args = parser.parse_args(["analyze", *REQUIRED["analyze"]])
    assert config_from_args(args) == default_config()


def test_analyze_flags_set_the_key_they_are_named_after():
    from seqmine.cli.commands.analyze import config_from_args
    parser, _ = _commands()
    args = parser.parse_args(["analyze", *REQUIRED["analyze"], "--max-gap", "none",
                              "--no-skip-pauses", "--permutations", "99", "--bootstrap", "7",
                              "--splits", "3", "--jobs", "2", "--seed", "5", "--duplicates",
                              "keep", "--redundancy", "none", "--no-phases"])
    cfg = config_from_args(args)
    assert cfg["mine"]["max_gap"] is None and cfg["mine"]["skip_pauses"] is False
    assert cfg["contrast"]["n_permutations"] == 99 and cfg["contrast"]["n_bootstrap"] == 7
    assert cfg["validate"]["n_splits"] == 3  # [phases] n_splits: in the file only
    assert cfg["phases"]["n_splits"] == DEFAULT_CONFIG["phases"]["n_splits"]
    assert cfg["n_jobs"] == 2 and cfg["seed"] == 5 and cfg["events"]["duplicates"] == "keep"
    assert cfg["contrast"]["redundancy"] is None and cfg["phases"]["enabled"] is False


def test_old_spellings_are_gone():
    _, commands = _commands()
    for cmd, p in commands.items():
        flags = {s for a in p._actions for s in a.option_strings}
        assert not flags & OLD_FLAGS, f"seqmine {cmd} still has {sorted(flags & OLD_FLAGS)}"


#: Options without a configuration key whose default is a parameter of the API.
CLI_TO_API = [
    ("contrast", "redundancy_order", "scoring.contrast.contrast", "redundancy_order"),
    ("contrast", "rate_unit", "scoring.contrast.contrast", "rate_unit"),
    ("validate", "train_on", "validation.crossval.validate", "train_on"),
    ("validate", "hmm_states", "validation.features.HMMLikelihoodFeaturizer", "n_states"),
    ("watch", "cooldown", "detection.watcher.Watcher", "cooldown_seconds"),
    ("watch", "tolerance", "detection.watcher.Watcher", "out_of_order_tolerance"),
    ("detectors", "absence_events", "detection.detectors.export_detectors",
     "absence_after_events"),
    ("detectors", "absence_seconds", "detection.detectors.export_detectors",
     "absence_after_seconds"),
]


@pytest.mark.parametrize("cmd, dest, path, param", CLI_TO_API,
                         ids=[f"{c} {d}" for c, d, _, _ in CLI_TO_API])
def test_other_command_defaults_equal_the_api(cmd, dest, path, param):
    _, commands = _commands()
    value = getattr(commands[cmd].parse_args(REQUIRED[cmd]), dest)
    assert value == _signature(_obj(path)).parameters[param].default


def test_phase_state_range_and_watch_idle_timeout():
    _, commands = _commands()
    args = commands["phases"].parse_args(REQUIRED["phases"])
    from seqmine.phases.fitting import parse_state_range
    assert parse_state_range(args.states) == _config(P, ("min_states", "max_states"))
    watch = commands["watch"].parse_args(REQUIRED["watch"])
    idle = _signature(_obj("detection.watcher.Watcher")).parameters["idle_timeout"].default
    assert float(watch.idle_timeout) == idle


def test_none_is_the_one_spelling_of_no_limit(tmp_path):
    from seqmine.config import load_config
    parser, _ = _commands()
    for cmd in ("mine", "analyze", "validate"):
        args = parser.parse_args([cmd, *REQUIRED[cmd], "--max-gap", "none"])
        assert args.max_gap is None
    path = tmp_path / "c.toml"
    path.write_text('[mine]\nmax_gap = "none"\nmax_length = "None"\n', encoding="utf-8")
    cfg = load_config(path)
    assert cfg["mine"]["max_gap"] is None and cfg["mine"]["max_length"] is None
    path.write_text("[mine]\nmax_gap = -1\n", encoding="utf-8")
    with pytest.raises(seqmine.ParameterError, match=r"'mine.max_gap' must be 0 or more, or "
                                                     r"\"none\" for no limit; got -1"):
        load_config(path)
