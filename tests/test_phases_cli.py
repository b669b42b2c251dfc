"""``seqmine phases`` on the command line."""

import json

from seqmine.cli.main import main
from seqmine.encoding.sequences import SequenceDB


def _write_db(path):
    seqs = ([["set_light", "advance_week", "measure_height", "pause:long"]] * 6
            + [["paint_pot", "paint_pot", "reset", "set_light", "set_water"]] * 6 + [["reset"]])
    db = SequenceDB.from_lists(seqs, groups=["strong"] * 6 + ["weak"] * 7,
                               pause_tokens=["pause:long"])
    db.save(path)
    return db


def test_cli_writes_phases_folder(tmp_path, capsys):
    _write_db(tmp_path / "db")
    rc = main(["phases", str(tmp_path / "db"), "--out", str(tmp_path / "out"), "--states", "1-2",
               "--restarts", "2", "--seed", "1", "--splits", "2", "--permutations", "2"])
    cap = capsys.readouterr()
    assert rc == 0
    assert "phase models written to" in cap.out
    assert "1 sequences shorter than 2 tokens left out" in cap.err
    folder = tmp_path / "out" / "phases"
    summary = json.loads((folder / "phases.json").read_text())
    assert summary["n_excluded"] == 1 and summary["params"]["random_state"] == 1
    assert set(summary["models"]) == {"pooled", "strong", "weak"}
    sel = (folder / "state_selection.csv").read_text().splitlines()
    assert sel[0].startswith("model,n_states,n_parameters") and len(sel) == 3


def test_cli_jobs_equal_serial(tmp_path, capsys):
    _write_db(tmp_path / "db")
    outs = []
    for jobs in ("1", "2"):
        out = tmp_path / f"out{jobs}"
        rc = main(["phases", str(tmp_path / "db"), "--out", str(out), "--states", "2",
                   "--restarts", "2", "--splits", "0", "--permutations", "0", "--jobs", jobs,
                   "-q"])
        assert rc == 0
        outs.append(out / "phases")
    for name in ("model_pooled.json", "model_group-weak.json", "state_paths.csv",
                 "model_distance.csv"):
        assert (outs[0] / name).read_bytes() == (outs[1] / name).read_bytes(), name
    capsys.readouterr()


def test_cli_user_errors(tmp_path, capsys):
    _write_db(tmp_path / "db")
    rc = main(["phases", str(tmp_path / "missing"), "--out", str(tmp_path / "o")])
    assert rc == 2
    assert "not a sequence database folder" in capsys.readouterr().err
    rc = main(["phases", str(tmp_path / "db"), "--out", str(tmp_path / "o"), "--states", "9",
               "-q"])
    err = capsys.readouterr().err
    assert rc == 2 and "cannot support 9 states" in err and "--states" in err
    assert len(err.strip().splitlines()) == 1
    rc = main(["phases", str(tmp_path / "db"), "--out", str(tmp_path / "o"), "--states", "a"])
    assert rc == 2 and "must look like" in capsys.readouterr().err


def test_cli_hints_at_top_of_range(tmp_path, capsys):
    seqs = ([["set_light", "advance_week", "measure_height", "pause:long"]] * 12
            + [["paint_pot", "paint_pot", "reset", "set_light", "set_water"]] * 12)
    SequenceDB.from_lists(seqs, groups=["strong"] * 12 + ["weak"] * 12,
                          pause_tokens=["pause:long"]).save(tmp_path / "db")
    rc = main(["phases", str(tmp_path / "db"), "--out", str(tmp_path / "out"), "--states", "1-2",
               "--restarts", "1", "--splits", "0", "--permutations", "0"])
    assert rc == 0
    summary = json.loads((tmp_path / "out" / "phases" / "phases.json").read_text())
    err = capsys.readouterr().err
    assert summary["n_states"] == 2 and summary["n_states_at_top_of_range"]
    # said once, as a warning that names the option to widen
    assert err.count("largest tried") == 1
    assert ("seqmine: warning [phase_states_at_top_of_range]: The chosen number of phases (2) "
            "is the largest tried") in err
    assert "--states 1-4" in err
    assert [w["code"] for w in summary["warnings"]] == ["phase_states_at_top_of_range"]
