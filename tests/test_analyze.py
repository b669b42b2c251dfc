"""End to end: ``seqmine analyze`` through the command line on generated greenhouse data."""

import json

import pandas as pd
import pytest

from seqmine.cli.main import main
from seqmine.config import load_config
from seqmine.demo_data import planted_patterns, write_greenhouse
from seqmine.errors import ParameterError

# A fast configuration: small phase and validation settings keep the test short.
FAST_TOML = """
seed = 11
[phases]
min_states = 2
max_states = 3
n_restarts = 1
n_iter = 30
[validate]
n_splits = 3
n_bootstrap = 100
fractions = [0.5, 1.0]
[contrast]
n_bootstrap = 20
"""

CONTRACT_FILES = ["summary.json", "rejects.csv", "patterns.csv", "transitions.csv", "phases",
                  "early_prediction.csv", "detectors.json", "report.html"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    base = tmp_path_factory.mktemp("analyze")
    paths = write_greenhouse(base / "data", 160, random_state=5)
    cfg = base / "fast.toml"
    cfg.write_text(FAST_TOML, encoding="utf-8")
    outs = []
    for k in range(2):
        out = base / f"out{k}"
        code = main(["analyze", str(paths["events"]), "--outcomes", str(paths["outcomes"]),
                     "--out", str(out), "--config", str(cfg), "--quiet"])
        assert code == 0
        outs.append(out)
    return paths, outs


def test_every_contract_file_is_written(runs):
    _, (out, _) = runs
    for name in CONTRACT_FILES:
        assert (out / name).exists(), name
    assert (out / "phases" / "phases.json").is_file()


def test_patterns_csv_contract_columns(runs):
    _, (out, _) = runs
    tab = pd.read_csv(out / "patterns.csv", keep_default_na=False)
    for col in ["pattern", "length", "support_strong", "support_weak", "p_value", "q_value",
                "favours", "risk_difference", "odds_ratio", "cohens_h", "cliffs_delta",
                "stability"]:
        assert col in tab.columns, col
    assert set(tab["favours"]) <= {"strong", "weak", ""}
    assert tab["pattern"].str.contains(" > ").all()


def test_summary_reconciles_rows(runs):
    _, (out, _) = runs
    s = json.loads((out / "summary.json").read_text())
    rejects = pd.read_csv(out / "rejects.csv")
    assert s["rows_in"] == s["rows_kept"] + s["rows_rejected"]
    assert s["rows_rejected"] == len(rejects)
    assert s["seed"] == 11 and s["configuration"]["phases"]["max_states"] == 3
    assert s["patterns_mined"] >= s["patterns_significant"] > 0
    assert set(s["versions"]) >= {"seqmine", "numpy", "pandas", "scipy", "hmmlearn"}


def test_planted_behaviours_favour_the_right_group(runs):
    # ground truth written by the generator beside the data (not a check value of ours:
    # the direction each behaviour was planted with)
    paths, (out, _) = runs
    truth = planted_patterns(json.loads(paths["ground_truth"].read_text()))
    tab = pd.read_csv(out / "patterns.csv", keep_default_na=False).set_index("pattern")
    for _, row in truth.iterrows():
        got = tab.loc[row["pattern"], "favours"] if row["pattern"] in tab.index else ""
        want = "" if row["direction"] == "neutral" else row["direction"]
        assert got == want, (row["pattern"], got, want)


def test_same_seed_gives_identical_files(runs):
    _, (a, b) = runs
    for name in ["patterns.csv", "detectors.json", "summary.json", "transitions.csv",
                 "early_prediction.csv"]:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_config_rejects_unknown_keys(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("[mine]\nmin_suport = 0.3\n", encoding="utf-8")
    with pytest.raises(ParameterError, match="unknown option 'mine.min_suport'. Did you mean 'mine.min_support'"):
        load_config(p)


def test_flags_override_config(tmp_path, capsys):
    from seqmine.cli.commands.analyze import config_from_args
    from seqmine.cli.main import build_parser
    p = tmp_path / "c.toml"
    p.write_text("[mine]\nmin_support = 0.3\nmax_length = 3\n", encoding="utf-8")
    args = build_parser().parse_args(["analyze", "e.csv", "--outcomes", "o.csv", "--out", "x",
                                      "--config", str(p), "--max-length", "5"])
    cfg = config_from_args(args)
    assert cfg["mine"]["min_support"] == 0.3      # from the file
    assert cfg["mine"]["max_length"] == 5         # the flag wins
    assert cfg["mine"]["max_gap"] == 0            # default


def test_a_flag_equal_to_its_default_still_overrides_the_file(tmp_path):
    # regression: a flag was ignored when its value equalled the parser default
    from seqmine.cli.commands.analyze import config_from_args
    from seqmine.cli.main import build_parser
    p = tmp_path / "c.toml"
    p.write_text("[mine]\nmin_support = 0.3\n", encoding="utf-8")
    args = build_parser().parse_args(["analyze", "e.csv", "--outcomes", "o.csv", "--out", "x",
                                      "--config", str(p), "--min-support", "0.2"])
    assert config_from_args(args)["mine"]["min_support"] == 0.2


def test_unknown_hmm_option_is_a_user_error(tmp_path, capsys):
    paths = write_greenhouse(tmp_path / "d", 30, random_state=2)
    cfg = tmp_path / "c.toml"
    cfg.write_text("[phases]\nenabled = false\n[validate.hmm]\nn_statez = 3\n", encoding="utf-8")
    code = main(["analyze", str(paths["events"]), "--outcomes", str(paths["outcomes"]),
                 "--out", str(tmp_path / "o"), "--config", str(cfg), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "unknown option 'validate.hmm.n_statez'" in err
