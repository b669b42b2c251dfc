"""Malformed input through the command line: exit 2, one line naming the fix, no traceback."""

import json

import pytest

from seqmine.cli.main import main

GOOD_EVENTS = "learner,time,action\n" + "".join(
    f"L{i},{t},{a}\n" for i in range(6) for t, a in enumerate(["set_light", "advance_week",
                                                                "measure_height", "reset"]))
GOOD_OUTCOMES = "learner,pre,post,max\n" + "".join(f"L{i},2,{3 + i},20\n" for i in range(6))


def _run(tmp_path, capsys, events=GOOD_EVENTS, outcomes=GOOD_OUTCOMES, extra=(),
         events_bytes=None, ev_name="events.csv"):
    ev = tmp_path / ev_name
    if events_bytes is not None:
        ev.write_bytes(events_bytes)
    elif events is not None:
        ev.write_text(events, encoding="utf-8")
    oc = tmp_path / "outcomes.csv"
    if outcomes is not None:
        oc.write_text(outcomes, encoding="utf-8")
    code = main(["encode", str(ev), "--outcomes", str(oc), "--out", str(tmp_path / "out"),
                 "--quiet", *extra])
    err = capsys.readouterr().err
    return code, err


def test_good_input_runs(tmp_path, capsys):
    code, err = _run(tmp_path, capsys)
    assert code == 0, err
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["rows_in"] == summary["rows_kept"] + summary["rows_rejected"] == 24
    assert summary["sequences_per_group"] == {"strong": 3, "weak": 3}


CASES = [
    # (id, kwargs for _run, expected message fragment)
    ("missing events file", dict(events=None), "file not found"),
    ("empty events file", dict(events=""), "the file is empty"),
    ("header only", dict(events="learner,time,action\n"), "no data rows"),
    ("missing column with suggestion", dict(events=GOOD_EVENTS.replace("learner,", "Learner,", 1)),
     "Did you mean 'Learner'"),
    ("non-UTF-8 bytes", dict(events_bytes=b"learner,time,action\nL\xe9,1,x\n"), "not valid utf-8"),
    ("all rows rejected", dict(events="learner,time,action\nL0,soon,x\nL1,later,y\n"),
     "all 2 rows were rejected"),
    ("one group empty", dict(outcomes="learner,pre,post,max\n" + "".join(
        f"L{i},2,10,20\n" for i in range(6))), "Group 'strong' has 0 learner"),
    ("no learner matches", dict(outcomes="learner,pre,post,max\nX1,1,2,20\nX2,1,3,20\n"),
     "No learner has both events and a group"),
    ("duplicate outcome rows", dict(outcomes=GOOD_OUTCOMES + "L1,2,5,20\n"),
     "learner 'L1' appears on rows 2, 7"),
    ("negative score", dict(outcomes=GOOD_OUTCOMES.replace("L0,2,", "L0,-2,")), "is negative"),
    ("NaN score", dict(outcomes=GOOD_OUTCOMES.replace("L0,2,3,", "L0,2,nan,")), "is not a number"),
    ("post above max", dict(outcomes=GOOD_OUTCOMES.replace("L0,2,3,", "L0,2,30,")),
     "post = 30 is above max = 20"),
    ("missing outcomes file", dict(outcomes=None), "outcomes file not found"),
    ("unknown template field", dict(extra=["--template", "{colour}"]), "allowed fields"),
    ("bad pause thresholds", dict(extra=["--pause-strategy", "fixed", "--pause-thresholds", "5,x"]),
     "--pause-thresholds: expected comma-separated numbers"),
    ("descending pause thresholds", dict(extra=["--pause-strategy", "fixed", "--pause-thresholds",
                                                "30,5"]), "strictly ascending"),
    ("fixed without thresholds", dict(extra=["--pause-strategy", "fixed"]), "needs pause_thresholds"),
    ("implicit label unknown", dict(extra=["--implicit-pauses", "tiny"]), "not pause bin labels"),
    ("missing mapping file", dict(extra=["--mapping", "nope.csv"]), "mapping file not found"),
    ("unreadable parquet", dict(events="not parquet", ev_name="events.parquet"),
     "Parquet"),
    ("malformed xAPI", dict(events='{"statements": 5}', ev_name="events.json"),
     "expected a JSON array of xAPI statements"),
    ("label outcomes but no groups", dict(outcomes="learner,label\n" + "".join(
        f"L{i},pass\n" for i in range(6))), "only one group"),
]


@pytest.mark.parametrize("kwargs,fragment", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_exits_2_with_one_line(tmp_path, capsys, kwargs, fragment):
    import re
    code, err = _run(tmp_path, capsys, **kwargs)
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqmine: error: "), err
    assert re.search(fragment, lines[0], flags=re.IGNORECASE), lines[0]
    assert "Traceback" not in err


def test_bad_option_exits_2(capsys):
    assert main(["encode", "--nope"]) == 2
    assert main(["no-such-command"]) == 2


def test_debug_shows_traceback(tmp_path):
    with pytest.raises(Exception, match="file not found"):
        main(["encode", str(tmp_path / "x.csv"), "--outcomes", "o.csv", "--out", str(tmp_path),
              "--debug"])
