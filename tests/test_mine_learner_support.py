"""Minimum support counted over learners (``support_unit="learner"``) through the API and
the command line, on a database where learners have several sessions."""

import json

import pandas as pd

from seqmine.cli.main import main
from seqmine.encoding.sequences import SequenceDB
from seqmine.mining.miner import mine


def _sessions_db():
    # Each of four strong learners shows "water > measure" in one of its three sessions;
    # the other sessions hold other actions. By sequences the pattern is in 4 of 12
    # strong sequences (1/3); by learners in 4 of 4 (hand count).
    seqs, groups, learners = [], [], []
    for i in range(4):
        for s in range(3):
            seqs.append(["water", "measure"] if s == i % 3 else ["light", "chart"])
            groups.append("strong")
            learners.append(f"S{i}")
    for i in range(4):
        seqs.append(["light", "chart"])
        groups.append("weak")
        learners.append(f"W{i}")
    return SequenceDB.from_lists(seqs, groups=groups, learners=learners)


def test_learner_support_keeps_a_pattern_every_learner_shows_once():
    db = _sessions_db()
    by_sequence = mine(db, min_support=0.5, support_unit="sequence")
    by_learner = mine(db, min_support=0.5, support_unit="learner")
    assert "water > measure" not in by_sequence.names
    assert "water > measure" in by_learner.names and "light > chart" in by_learner.names
    i = by_learner.names.index("water > measure")
    assert by_learner.support_counts[i].tolist() == [4, 0]   # still sequence supports
    assert by_learner.constraints["support_unit"] == "learner"
    # a count threshold is a number of learners: 4 strong learners reach 4, not 5
    assert "water > measure" in mine(db, min_support=4, support_unit="learner").names


def test_command_line_option_and_record(tmp_path):
    db = _sessions_db()
    db.save(tmp_path / "sequences")
    assert main(["mine", str(tmp_path / "sequences"), "--out", str(tmp_path / "ps"),
                 "--min-support", "0.5", "--support-unit", "learner", "-q"]) == 0
    table = pd.read_csv(tmp_path / "ps" / "patterns.csv")
    assert "water > measure" in set(table["pattern"])
    meta = json.loads((tmp_path / "ps" / "patternset.json").read_text())
    assert meta["constraints"]["support_unit"] == "learner"
    assert main(["mine", str(tmp_path / "sequences"), "--out", str(tmp_path / "bad"),
                 "--support-unit", "learners", "-q"]) == 2


def test_sequence_support_with_several_sessions_per_learner_is_flagged(tmp_path, capsys):
    db = _sessions_db()  # 16 sequences of 8 learners: 2.0 per learner
    db.save(tmp_path / "sequences")
    assert main(["mine", str(tmp_path / "sequences"), "--out", str(tmp_path / "a"),
                 "--min-support", "0.5"]) == 0
    err = capsys.readouterr().err
    assert "warning [support_counts_sequences]" in err and "2.0 sequences each" in err
    assert main(["mine", str(tmp_path / "sequences"), "--out", str(tmp_path / "b"),
                 "--min-support", "0.5", "--support-unit", "learner"]) == 0
    assert "support_counts_sequences" not in capsys.readouterr().err


def test_analyze_records_and_reports_what_support_counts(tmp_path):
    from _run_helpers import analyze_argv, make_data

    data = make_data(tmp_path / "data")
    out = tmp_path / "out"
    assert main(analyze_argv(data, out, "--support-unit", "learner", "-q")) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["method"]["support_unit"] == "learner"
    assert summary["configuration"]["mine"]["support_unit"] == "learner"
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "What the minimum support counts:</b> learners (a learner counts once" in page
