"""``seqmine detectors`` on the command line."""

from __future__ import annotations

import json
import re

import pytest
from test_detect import ENCODING, _table

from seqmine.cli.main import main
from seqmine.detection.detectors import export_detectors, load_detectors
from seqmine.encoding.sequences import SequenceDB


@pytest.fixture
def run_dir(tmp_path):
    db = SequenceDB.from_lists(
        [["set_light", "set_water", "advance_week", "pause:long"], ["reset", "paint_pot"],
         ["set_light", "advance_week", "measure_height", "pause:long"]],
        groups=["weak", "weak", "strong"], group_names=["strong", "weak"],
        pause_tokens=["pause:long"])
    db.encoding = dict(ENCODING)
    db.save(tmp_path / "sequences")
    _table().to_csv(tmp_path / "patterns.csv", index=False)
    (tmp_path / "patterns").mkdir()
    (tmp_path / "patterns" / "patternset.json").write_text(json.dumps(
        {"format": "seqmine-patternset", "version": 1,
         "constraints": {"max_gap": 1, "max_window": 5, "skip_pauses": True, "min_support": 0.1}}),
        encoding="utf-8")
    return tmp_path


def test_detectors_command_writes_a_valid_file(run_dir, capsys):
    out = run_dir / "detectors.json"
    assert main(["detectors", str(run_dir / "patterns.csv"), "--sequences",
                 str(run_dir / "sequences"), "--out", str(out), "--absence-events", "25"]) == 0
    assert "wrote 2 detectors (1 discourage, 1 encourage) from 7 patterns" in capsys.readouterr().out
    doc = load_detectors(out)
    # constraints found in patterns/patternset.json beside the table
    assert doc["matching"] == {"max_gap": 1, "max_window": 5, "skip_pauses": True}
    assert doc["selection"]["constraints_from"].endswith("patternset.json")
    assert doc["groups"]["sizes"] == {"strong": 1, "weak": 2}
    assert doc["encoding"] == json.loads(json.dumps(ENCODING))
    assert doc["detectors"][1]["absence"] == {"after_events": 25, "after_seconds": None}
    assert doc["vocabulary"] == sorted(["set_light", "set_water", "advance_week", "reset",
                                        "paint_pot", "measure_height"])


def test_detectors_command_options_override(run_dir, capsys):
    out = run_dir / "d.json"
    assert main(["detectors", str(run_dir / "patterns.csv"), "--sequences", str(run_dir / "sequences"),
                 "--out", str(out), "--max-gap", "none", "--max-window", "3", "--no-skip-pauses",
                 "--favours", "weak", "--min-length", "2", "--keep-redundant", "-q"]) == 0
    doc = load_detectors(out)
    assert doc["matching"] == {"max_gap": None, "max_window": 3, "skip_pauses": False}
    assert [d["tokens"] for d in doc["detectors"]] == [
        ["set_light", "set_water", "advance_week"], ["set_light", "set_water"]]
    assert capsys.readouterr().out == ""


@pytest.mark.parametrize("args, message", [
    (["missing.csv"], "contrast table not found; create it with 'seqmine contrast'"),
    (["patterns.csv", "--patterns", "sequences"], "no patternset.json there"),
    (["patterns.csv", "--effect", "hedges_g"], r"lacks column\(s\) hedges_g"),
    (["patterns.csv", "--max-q", "3"], r"'max_q' parameter of select_detectors must be in"),
    (["patterns.csv", "--strong-group", "top"], "'strong' group 'top' of build_detectors"),
    (["patterns.csv", "--max-gap", "-2"], "--max-gap: expected a whole number >= 0 or 'none'"),
    (["patterns.csv", "--encourage-share", "2"],
     r"'encourage_share' parameter of export_detectors must be in \[0, 1\]"),
    (["patterns.csv", "--absence-events", "0"],
     "--absence-events: expected a whole number >= 1, 'auto' or 'none'"),
    (["patterns.csv", "--evidence", "beyond"],
     r"--evidence: expected a comma-separated list of order, presence, volume, or 'any'"),
])
def test_detectors_command_errors_exit_2(run_dir, capsys, args, message):
    argv = ["detectors"] + [str(run_dir / a) if a.endswith((".csv", "sequences")) else a
                            for a in args]
    argv += ["--sequences", str(run_dir / "sequences"), "--out", str(run_dir / "x.json")]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert re.search(message, err), err
    assert not (run_dir / "x.json").exists()


def test_detectors_command_without_sequence_db(run_dir, capsys):
    assert main(["detectors", str(run_dir / "patterns.csv"), "--sequences", str(run_dir / "nope"),
                 "--out", str(run_dir / "x.json")]) == 2
    assert "not a sequence database folder" in capsys.readouterr().err


def test_detectors_command_balance_and_examples_options(run_dir):
    # one distinct candidate per direction (the others are nested or unstable)
    out = run_dir / "d.json"
    base = ["detectors", str(run_dir / "patterns.csv"), "--sequences", str(run_dir / "sequences"),
            "--out", str(out), "-q"]
    assert main(base + ["--max-detectors", "1", "--encourage-share", "0"]) == 0
    assert [d["direction"] for d in load_detectors(out)["detectors"]] == ["discourage"]
    assert main(base + ["--max-detectors", "1", "--encourage-share", "1"]) == 0
    assert [d["direction"] for d in load_detectors(out)["detectors"]] == ["encourage"]
    # a slot one direction cannot fill goes to the other
    assert main(base + ["--max-detectors", "2", "--encourage-share", "1", "--no-examples",
                        "--absence-events", "none"]) == 0
    dets = load_detectors(out)["detectors"]
    assert sorted(d["direction"] for d in dets) == ["discourage", "encourage"]
    assert not any("example" in d for d in dets)
    assert [d["absence"]["after_events"] for d in dets if d["direction"] == "encourage"] == [None]


def test_export_detectors_matches_the_two_steps(run_dir):
    db = SequenceDB.load(run_dir / "sequences")
    doc = export_detectors(_table(), db, {"max_gap": 1}, absence_after_seconds=600,
                           absence_after_events=None)
    assert [d["id"] for d in doc["detectors"]] == ["D001", "D002"]
    assert doc["detectors"][1]["absence"] == {"after_events": None, "after_seconds": 600.0}
    # by default the absence rule comes from the data: the one strong sequence completes
    # 'set_light > advance_week > measure_height > pause:long' at its 3rd action event
    # (counted by hand; the pause token is not an event)
    doc = export_detectors(_table(), db, {"max_gap": 1})
    assert doc["detectors"][1]["absence"] == {"after_events": 3, "after_seconds": None}
    ex = doc["detectors"][1]["example"]
    assert ex["group"] == "strong" and [e["token"] for e in ex["events"] if e["matched"]] == [
        "set_light", "advance_week", "measure_height", "pause:long"]
    assert doc["detectors"][1]["evidence"]["pause_ranges"] == {"pause:long": "30 s or more"}
    assert "long pause (30 s or more)" in doc["detectors"][1]["hint"]
    assert doc["selection"]["max_q"] == 0.05 and doc["selection"]["effect"] == "cohens_h"
