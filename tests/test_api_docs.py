"""The Python API: docs/api.md runs as written, and the API and the command line write
identical files for identical settings."""

import doctest
from pathlib import Path

import pandas as pd
import pytest

import seqmine
from seqmine.cli.main import main
from seqmine.config import DEFAULT_CONFIG
from seqmine.demo_data import write_greenhouse

ROOT = Path(__file__).resolve().parents[1]


def test_api_page_examples_run(monkeypatch):
    monkeypatch.chdir(ROOT)  # the page reads datasets/greenhouse/ from the repository root
    result = doctest.testfile(str(ROOT / "docs" / "api.md"), module_relative=False,
                              optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE,
                              raise_on_error=False)
    assert result.attempted > 40
    assert result.failed == 0, f"{result.failed} example(s) of docs/api.md failed (see above)"


def test_api_page_is_linked():
    assert "(api.md)" in (ROOT / "docs" / "index.md").read_text(encoding="utf-8")
    assert "docs/api.md" in (ROOT / "README.md").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    return write_greenhouse(tmp_path_factory.mktemp("api_cli"), 40, random_state=3,
                            events_per_learner=(30, 60))


def _files(folder):
    folder = Path(folder)
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _same_folders(a, b):
    fa, fb = _files(a), _files(b)
    assert sorted(fa) == sorted(fb)
    different = [name for name in fa if fa[name] != fb[name]]
    assert not different, f"files differ between the API and the command line: {different}"
    return fa


def test_analyze_api_and_command_line_write_identical_files(data, tmp_path):
    settings = {"mine": {"min_support": 0.3}, "contrast": {"n_bootstrap": 10},
                "phases": {"enabled": False}, "validate": {"enabled": False}, "seed": 7}
    res = seqmine.analyze(data["events"], data["outcomes"], tmp_path / "api", settings,
                          quiet=True)
    code = main(["analyze", str(data["events"]), "--outcomes", str(data["outcomes"]),
                 "--out", str(tmp_path / "cli"), "--min-support", "0.3", "--bootstrap", "10",
                 "--no-phases", "--no-validate", "--seed", "7", "-q"])
    assert code == 0
    files = _same_folders(tmp_path / "api", tmp_path / "cli")
    assert {"patterns.csv", "summary.json", "report.html", "detectors.json"} <= set(files)
    # the result object holds what the files hold
    on_disk = pd.read_csv(tmp_path / "api" / "patterns.csv", keep_default_na=False)
    assert on_disk["pattern"].tolist() == res.patterns["pattern"].tolist()
    assert len(res.detectors) == res.summary["detectors"]
    assert res.report == tmp_path / "api" / "report.html"
    assert res.summary["configuration"]["mine"]["min_support"] == 0.3


def test_stage_functions_and_commands_write_identical_files(data, tmp_path):
    from seqmine.cli.commands.contrast import read_patternset
    from seqmine.mining.miner import save_patternset
    from seqmine.scoring.contrast import contrast
    from seqmine._util.csvio import write_csv
    assert main(["encode", str(data["events"]), "--outcomes", str(data["outcomes"]),
                 "--out", str(tmp_path / "enc"), "-q"]) == 0
    seqs = tmp_path / "enc" / "sequences"
    db = seqmine.SequenceDB.load(seqs)
    # mine: defaults on both sides
    save_patternset(seqmine.mine(db), tmp_path / "mine_api")
    assert main(["mine", str(seqs), "--out", str(tmp_path / "mine_cli"), "-q"]) == 0
    _same_folders(tmp_path / "mine_api", tmp_path / "mine_cli")
    # contrast: defaults on both sides (the same seed: the analysis seed)
    write_csv(contrast(read_patternset(tmp_path / "mine_api"), db), tmp_path / "c_api.csv")
    assert main(["contrast", str(tmp_path / "mine_cli"), "--sequences", str(seqs), "--out",
                 str(tmp_path / "c_cli.csv"), "-q"]) == 0
    assert (tmp_path / "c_api.csv").read_bytes() == (tmp_path / "c_cli.csv").read_bytes()
    # phases: small settings, the same on both sides
    seqmine.fit_phases(db, n_states=2, n_restarts=1, n_splits=0, n_permutations=2).save(
        tmp_path / "ph_api" / "phases")
    assert main(["phases", str(seqs), "--out", str(tmp_path / "ph_cli"), "--states", "2",
                 "--restarts", "1", "--splits", "0", "--permutations", "2", "-q"]) == 0
    _same_folders(tmp_path / "ph_api", tmp_path / "ph_cli")


def test_analyze_settings_are_checked_and_merged_over_the_defaults(data, tmp_path):
    with pytest.raises(seqmine.ParameterError,
                       match=r"analyze\(config=...\): unknown option 'mine.min_suport'. "
                             r"Did you mean 'mine.min_support'"):
        seqmine.analyze(data["events"], data["outcomes"], tmp_path, {"mine": {"min_suport": 1}})
    toml = tmp_path / "c.toml"
    toml.write_text("[phases]\nenabled = false\n[validate]\nenabled = false\n"
                    "[contrast]\nn_bootstrap = 0\n", encoding="utf-8")
    res = seqmine.analyze(data["events"], data["outcomes"], tmp_path / "o", toml, quiet=True)
    assert res.phases is None and res.early_prediction is None
    assert res.summary["configuration"]["contrast"]["n_bootstrap"] == 0
    assert res.summary["configuration"]["mine"] == DEFAULT_CONFIG["mine"]
    assert res.patterns["stability"].isna().all()
    text = repr(res)
    assert text.startswith("AnalysisResult(out_dir=") and "patterns mined" in text
    assert list(res.warnings.columns) == ["code", "message", "count"]
