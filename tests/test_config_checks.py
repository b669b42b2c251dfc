"""The whole configuration is checked before anything is read or written.

Types (also of options whose default is empty), ranges, rules between options, huge
seeds, infinities and NaN stop ``seqmine analyze`` at once with one line naming the
option, before the events file is even opened (here it does not exist, and the message
is still about the option) and before the output folder is created.
"""

import pytest
from seqmine.cli.main import main

from seqmine.config import MAX_SEED, check_config, default_config
from seqmine.errors import ParameterError

CASES = [
    ("seed = 1e20", f"option 'seed' must be a whole number between 0 and {MAX_SEED}"),
    ("seed = -3", "option 'seed' must be a whole number between 0"),
    ("n_jobs = 0", "The 'n_jobs' parameter must be a positive int or -1"),
    ("scheduler = 3", "option 'scheduler' must be a string in quotes (or left out); got 3"),
    ("[mine]\nmax_window = \"x\"", "option 'mine.max_window' must be a whole number"),
    ("[mine]\nmin_support = 1.5", "option 'mine.min_support' must be a fraction in (0, 1]"),
    ("[mine]\nmin_length = 4\nmax_length = 2",
     "option 'mine.min_length' (4) is larger than 'mine.max_length' (2)"),
    ("[encode]\nmapping = 5", "option 'encode.mapping' must be a string in quotes"),
    ("[encode]\npause_strategy = \"fixed\"", "pause_strategy 'fixed' needs"),
    ("[encode]\npause_thresholds = [30, 5]", "must be strictly ascending"),
    ("[outcomes]\nmax_score = \"ten\"", "option 'outcomes.max_score' must be a finite number > 0"),
    ("[outcomes]\ngrouping = \"thresholds\"", "needs both 'outcomes.low' and 'outcomes.high'"),
    ("[contrast]\nalpha = nan", "option 'contrast.alpha' must be a finite number in (0, 1)"),
    ("[contrast]\nalpha = inf", "option 'contrast.alpha' must be a finite number in (0, 1)"),
    ("[events]\nmax_bytes = inf", "option 'events.max_bytes' must be a whole number"),
    ("[phases]\nmin_states = 5\nmax_states = 2",
     "option 'phases.min_states' (5) is larger than 'phases.max_states' (2)"),
    ("[phases]\nmax_sequences = 1.5", "option 'phases.max_sequences' must be a whole number"),
    ("[validate]\nfractions = [0.5, 1.5]", "option 'validate.fractions' must be a finite number"),
    ("[validate]\nfractions = []", "option 'validate.fractions' must be a list of numbers"),
    ("[validate]\nhmm = {n_statez = 3}", "unknown option 'validate.hmm.n_statez'"),
    ("[detectors]\nmax_q = 0", "option 'detectors.max_q' must be a finite number in (0, 1]"),
    ("[contrast]\nredundancy = 1.5", "option 'contrast.redundancy' must be a finite number"),
    ("[validate]\nn_splits = 1", "option 'validate.n_splits' must be a whole number between 2"),
]


@pytest.mark.parametrize("toml, fragment", CASES, ids=[c[0].split("\n")[-1] for c in CASES])
def test_configuration_errors_stop_before_anything_is_read(tmp_path, capsys, toml, fragment):
    cfg = tmp_path / "c.toml"
    cfg.write_text(toml + "\n")
    out = tmp_path / "out"
    rc = main(["analyze", str(tmp_path / "missing.csv"), "--outcomes", str(tmp_path / "o.csv"),
               "--out", str(out), "--config", str(cfg), "-q"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2, err
    assert len(err) == 1 and fragment in err[0], err
    assert not out.exists()


@pytest.mark.parametrize("value, fragment", [
    ("inf", "expected a whole number such as 2e10"), ("nan", "expected a whole number"),
    ("0", "option 'events.max_bytes' must be a whole number between 1"),
    ("-5", "option 'events.max_bytes' must be a whole number between 1")])
def test_max_bytes_flag_must_be_finite(tmp_path, capsys, value, fragment):
    rc = main(["analyze", str(tmp_path / "e.csv"), "--outcomes", str(tmp_path / "o.csv"),
               "--out", str(tmp_path / "out"), "--max-bytes", value, "-q"])
    err = capsys.readouterr().err
    assert rc == 2 and fragment in err, err
    assert not (tmp_path / "out").exists()


def test_the_rules_offer_the_stages_own_choices():
    from seqmine.config import OPTION_RULES
    from seqmine.inputs.clock import TIME_UNITS
    from seqmine.inputs.outcomes import MATCH_ID_RULES
    assert set(OPTION_RULES["events.time_unit"][1][0]) == set(TIME_UNITS)
    assert set(OPTION_RULES["outcomes.match_ids"][1][0]) == set(MATCH_ID_RULES)


def test_every_option_has_a_rule():
    from seqmine.config import DEFAULT_CONFIG, OPTION_RULES
    keys = {f"{s}.{k}" if isinstance(v, dict) else s
            for s, v in DEFAULT_CONFIG.items() for k in (v if isinstance(v, dict) else [s])}
    assert keys == set(OPTION_RULES)


def test_defaults_pass_and_whole_floats_become_ints():
    cfg = default_config()
    cfg["events"]["max_bytes"] = 2e10
    checked = check_config(cfg)
    assert checked["events"]["max_bytes"] == 20_000_000_000
    assert isinstance(checked["events"]["max_bytes"], int)
    with pytest.raises(ParameterError, match="option 'mine.max_gap' must be a whole number"):
        check_config(dict(cfg, mine=dict(cfg["mine"], max_gap=-2)))
