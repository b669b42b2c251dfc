"""Terminal safety of ``seqmine watch``: nothing from a log or a detectors file reaches
the terminal raw, and messages name the exact column.

C0 and C1 control characters, ESC, DEL and bidirectional overrides in hints, actions,
learners or file names are escaped in every line written (standard output stays valid
JSON with the same values); detector ids with such characters are refused when the
file is read; a malformed line names the 1-based column where parsing stopped.
"""

import json
import re

import pytest
from seqmine.cli.main import main

from seqmine.cli.commands.watch import json_problem

RAW = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069\u2028\u2029]")
HINT = "Stop \x1b[31mnow\x9b1;1H \u202eevil\x7f"


def _doc(det_id="D1", hint=HINT):
    return {"format": "seqmine-detectors", "version": 1,
            "encoding": {"template": "{action}"}, "vocabulary": ["run", "set"],
            "matching": {"max_gap": 0, "max_window": None, "skip_pauses": False},
            "detectors": [{"id": det_id, "tokens": ["set", "run"], "direction": "discourage",
                           "hint": hint}]}


def _watch(capsys, tmp_path, lines, doc=None, *extra):
    det = tmp_path / "d.json"
    det.write_text(json.dumps(doc or _doc()), encoding="utf-8")
    events = tmp_path / "e.jsonl"
    events.write_text("".join(line + "\n" for line in lines), encoding="utf-8")
    capsys.readouterr()
    rc = main(["watch", str(det), str(events), *extra])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


def test_hints_reach_standard_output_escaped_but_unchanged(capsys, tmp_path):
    rc, out, err = _watch(capsys, tmp_path, [
        json.dumps({"learner": "a", "time": 0, "action": "set"}),
        json.dumps({"learner": "a", "time": 5, "action": "run"})])
    assert rc == 0 and not RAW.search(out) and not RAW.search(err)
    (firing,) = [json.loads(line) for line in out.splitlines()]
    assert firing["hint"] == HINT  # the same value, written with \\u escapes


def test_messages_escape_what_the_stream_holds(capsys, tmp_path):
    rc, out, err = _watch(capsys, tmp_path, [
        json.dumps({"learner": "a", "time": 0, "action": "x\u202ey"}),  # accepted, unknown
        json.dumps({"learner": "b\x1b[2J", "time": 0, "action": "set"}),  # rejected
        '{"learner": "\x9b", "time": 1, "action": "set"',  # truncated
    ], _doc())
    assert rc == 0
    assert not RAW.search(err), err
    assert "x\\u202ey" in err  # the bidirectional override is shown as an escape
    assert "field 'learner' contains control characters" in err


@pytest.mark.parametrize("bad_id", ["D\x1b[31m1", "D\x9b1", "D\u202e1", " D1", "D" * 101])
def test_unsafe_detector_ids_are_refused(capsys, tmp_path, bad_id):
    rc, out, err = _watch(capsys, tmp_path, [], _doc(det_id=bad_id))
    lines = err.strip().splitlines()
    assert rc == 2 and len(lines) == 1, err
    assert "detectors[0].id" in lines[0] and "printable characters" in lines[0]
    assert not RAW.search(err)


@pytest.mark.parametrize("line, message", [
    ('{"learner": "a", "time": 1, "action": "set', "the line ends after column 42 before the "
                                                     "JSON value is complete (truncated?)"),
    ('{"learner": "a", "time": 1, "action": "set"', "the line ends after column 43 before the "
                                                    "JSON value is complete (truncated?)"),
    ('{"learner" "a"}', "expecting ':' delimiter at column 12"),
    ('{"learner": "a",, "time": 1}', "expecting property name enclosed in double quotes at "
                                     "column 17"),
])
def test_malformed_lines_name_the_exact_column(capsys, tmp_path, line, message):
    rc, _, err = _watch(capsys, tmp_path, [line])
    assert rc == 0
    assert f"e.jsonl:1: malformed JSON ({message}); event skipped" in err, err
    assert "at at" not in err


def test_json_problem_counts_characters_not_bytes():
    line = '{"learner": "é", "time" 1}'
    try:
        json.loads(line)
    except json.JSONDecodeError as exc:
        assert json_problem(exc, line) == "expecting ':' delimiter at column 25"
        assert line[24] == "1"
