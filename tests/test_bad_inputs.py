"""Bad-input corpus: every malformed input ends in one of two documented ways.

Either the command stops with exit status 2 and exactly one ``seqmine: error:`` line
on standard error that names the file (and row/line/column or option) and a fix, or
the unusable rows are rejected with reasons while the row accounting stays intact
(``rows_in == rows_kept + rows_rejected`` in summary.json, one line per rejected row
in rejects.csv). The live watcher skips bad events with one line each and goes on.
docs/reliability.md lists the behaviour per category.

All cases run through the command line (``seqmine.cli.main``); the inputs are
generated here from the greenhouse scenario (small, so the file runs in seconds).
"""

import json
import time

import numpy as np
import pandas as pd
import pytest

from seqmine.cli.main import main
from seqmine.encoding.sequences import SequenceDB
from seqmine.inputs.load import load_events

ACTIONS = ["add_seedling", "set_light", "set_water", "advance_week", "measure_height",
           "open_chart"]
N_LEARNERS, PER_LEARNER = 6, 8


def _row(learner, t, action, sep=","):
    return sep.join([learner, str(t), action])


def events_text(sep=",", time_fmt=None, n=N_LEARNERS, per=PER_LEARNER):
    """A valid event log: n learners x per events, 10 s apart, distinct per learner."""
    rows = [sep.join(["learner", "time", "action"])]
    for i in range(n):
        for j in range(per):
            t = 10 * j + i
            if time_fmt is not None:
                t = time_fmt(t)
            rows.append(_row(f"L{i}", t, ACTIONS[(i * j + j) % len(ACTIONS)], sep))
    return "\n".join(rows) + "\n"


def iso(t, zone="Z"):
    """ISO 8601 time ``t`` seconds after 2026-03-02T09:00:00 in ``zone``."""
    return f"2026-03-02T09:{t // 60:02d}:{t % 60:02d}{zone}"


BASE = events_text()
N_BASE = N_LEARNERS * PER_LEARNER
OUTCOMES = "learner,pre,post,max\n" + "".join(f"L{i},2,{3 + i},10\n" for i in range(N_LEARNERS))


# ------------------------------------------------------------------ helpers
def _write(path, content):
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8", newline="")
    return path


def _run(capsys, argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def encode(tmp_path, capsys, events, outcomes=OUTCOMES, name="events.csv", extra=()):
    ev = _write(tmp_path / name, events)
    oc = _write(tmp_path / "outcomes.csv", outcomes)
    out = tmp_path / "out"
    rc, _out, err = _run(capsys, ["encode", ev, "--outcomes", oc, "--out", out, "-q", *extra])
    return rc, err, out


def assert_one_error(rc, err, *needles):
    """Exit 2, exactly one 'seqmine: error:' line naming every needle, no traceback."""
    assert rc == 2, err
    lines = err.strip().splitlines()
    errors = [ln for ln in lines if ln.startswith("seqmine: error:")]
    assert len(errors) == 1, err
    assert all(ln.startswith("seqmine: ") for ln in lines), err  # warnings may precede
    assert "Traceback" not in err
    for needle in needles:
        assert needle in errors[0], errors[0]
    return errors[0]


def accounting(rc, err, out):
    """Exit 0 and intact row accounting; returns (summary, rejects)."""
    assert rc == 0, err
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    rejects = pd.read_csv(out / "rejects.csv", keep_default_na=False)
    assert summary["rows_in"] == summary["rows_kept"] + summary["rows_rejected"]
    assert len(rejects) == summary["rows_rejected"]
    assert sum(summary["rejects_by_reason"].values()) == summary["rows_rejected"]
    assert rejects["source_row"].is_unique
    db = SequenceDB.load(out / "sequences")
    assert not set(rejects["source_row"]) & set(db.source_rows.tolist())
    return summary, rejects


def reasons(rejects):
    return dict(zip(rejects["source_row"], rejects["reason"]))


# ============================================================ events: exit 2
@pytest.mark.parametrize("content, needles", [
    pytest.param("", ["events.csv", "the file is empty"], id="empty-file"),
    pytest.param("learner,time,action\n", ["events.csv", "no data rows"], id="header-only"),
    pytest.param("\n\n", ["events.csv", "header", "empty"], id="blank-lines-only"),
    pytest.param((BASE + "L1,500,caf\xe9\n").encode("latin-1"),
                 ["events.csv", "not valid utf-8", "line 50", "--encoding"],
                 id="latin-1-byte-in-a-row"),
    pytest.param(bytes(range(256)) * 8, ["events.csv", "not valid utf-8", "line 2"],
                 id="binary-junk"),
    pytest.param(BASE.encode("utf-16"), ["events.csv", "not valid utf-8", "line 1", "--encoding"],
                 id="utf-16-with-byte-order-mark"),
    pytest.param(BASE.replace("learner,", "student,"),
                 ["events.csv", "'learner' is missing", "--learner-column"],
                 id="renamed-column"),
    pytest.param("learner,time,action\nL1,yesterday,a\nL2,,b\nL3,soon,c\n",
                 ["events.csv", "all 3 rows were rejected", "bad_time"], id="all-times-bad"),
])
def test_events_fatal(tmp_path, capsys, content, needles):
    rc, err, out = encode(tmp_path, capsys, content)
    assert_one_error(rc, err, *needles)
    assert not (out / "summary.json").exists()


def test_wrong_delimiter_option(tmp_path, capsys):
    rc, err, _ = encode(tmp_path, capsys, BASE, extra=["--delimiter", ";"])
    assert_one_error(rc, err, "events.csv", "'learner' is missing", "--delimiter")


def test_multi_character_delimiter(tmp_path, capsys):
    rc, err, _ = encode(tmp_path, capsys, BASE, extra=["--delimiter", ";;"])
    assert_one_error(rc, err, "delimiter must be one character")


def test_file_over_max_bytes(tmp_path, capsys):
    # the size limit is checked before anything is read
    rc, err, _ = encode(tmp_path, capsys, BASE, extra=["--max-bytes", "100"])
    assert_one_error(rc, err, "events.csv", "limit", "--max-bytes")


def test_file_too_large_for_memory(tmp_path, capsys, monkeypatch):
    # with the default size limit, a file that would need more memory than the
    # machine has stops before it is read; an explicit --max-bytes loads it anyway
    import seqmine.inputs.load
    monkeypatch.setattr(seqmine.inputs.load, "_physical_memory", lambda: 20_000)
    rc, err, _ = encode(tmp_path, capsys, BASE)
    assert_one_error(rc, err, "events.csv", "GB of memory", "split the log", "--max-bytes")
    rc, err, out = encode(tmp_path, capsys, BASE, extra=["--max-bytes", "1e9"])
    accounting(rc, err, out)


def test_missing_and_folder(tmp_path, capsys):
    oc = _write(tmp_path / "outcomes.csv", OUTCOMES)
    rc, _, err = _run(capsys, ["encode", tmp_path / "nope.csv", "--outcomes", oc,
                               "--out", tmp_path / "o", "-q"])
    assert_one_error(rc, err, "nope.csv", "not found")
    rc, _, err = _run(capsys, ["encode", tmp_path, "--outcomes", oc, "--out", tmp_path / "o", "-q"])
    assert_one_error(rc, err, "is a folder")


@pytest.mark.parametrize("name, content, needles", [
    pytest.param("e.json", "hello", ["e.json", "none of the 1 records", "bad_json"],
                 id="xapi-not-json"),
    pytest.param("e.json", "[" * 100_000, ["e.json", "none of the 1 records"],
                 id="xapi-nested-too-deep"),
    pytest.param("e.json", '{"statements": 5}', ["e.json", "JSON array"], id="xapi-wrong-shape"),
    pytest.param("e.jsonl", "[1, 2]\n\"text\"\n", ["e.jsonl", "none of the 2 records"],
                 id="jsonl-no-objects"),
    pytest.param("e.parquet", b"PAR1 this is not parquet PAR1", ["e.parquet", "not a readable Parquet"],
                 id="parquet-garbage"),
    pytest.param("e.parquet", BASE.encode(), ["e.parquet", "not a readable Parquet"],
                 id="csv-named-parquet"),
])
def test_json_fatal(tmp_path, capsys, name, content, needles):
    rc, err, _ = encode(tmp_path, capsys, content, name=name)
    assert_one_error(rc, err, *needles)


# ============================================ events: rows rejected, accounting
def test_clean_baseline(tmp_path, capsys):
    summary, rejects = accounting(*encode(tmp_path, capsys, BASE))
    assert summary["rows_in"] == N_BASE and len(rejects) == 0


@pytest.mark.parametrize("content", [
    pytest.param("\ufeff" + BASE, id="byte-order-mark"),
    pytest.param(BASE.replace(",", ";"), id="semicolons"),
    pytest.param(BASE.replace(",", "\t"), id="tabs"),
    pytest.param(BASE.replace(",", "|"), id="pipes"),
    pytest.param(BASE.replace("\n", "\r\n"), id="crlf"),
    pytest.param(BASE.replace("\n", "\r"), id="cr-only"),
    pytest.param(BASE.rstrip("\n"), id="no-final-newline"),
])
def test_dialects_read_cleanly(tmp_path, capsys, content):
    summary, rejects = accounting(*encode(tmp_path, capsys, content))
    assert (summary["rows_in"], len(rejects)) == (N_BASE, 0)


@pytest.mark.parametrize("extra_rows, want", [
    pytest.param("L1,500\n", {"bad_fields"}, id="truncated-last-row"),
    pytest.param('L1,999,"open_chart\n', {"bad_fields"}, id="truncated-inside-quotes"),
    pytest.param("L1,600,open_chart,extra,more\n", {"bad_fields"}, id="extra-fields"),
    pytest.param("L1,501,open\x00chart\nL2,502,open\x07chart\nL\x1b3,503,open_chart\n",
                 {"control_characters"}, id="control-characters"),
    pytest.param(f"L1,504,{'x' * 5000}\n", {"action_too_long"}, id="very-long-action"),
    pytest.param("L1,505,\nL1,506,   \n,507,open_chart\nL1,,open_chart\n",
                 {"missing_action", "missing_learner", "missing_time"}, id="empty-fields"),
    pytest.param("L1,2026-03-02T09:00:00Z,open_chart\n", {"mixed_time_format"},
                 id="mixed-time-formats"),
    pytest.param("L1,1e12,open_chart\nL1,-5000000000,open_chart\nL1,inf,open_chart\n"
                 "L1,nan,open_chart\n", {"time_out_of_range", "bad_time"},
                 id="far-future-far-past-numeric"),
    pytest.param("L1,ten,open_chart\nL1,12:00,open_chart\n", {"bad_time"}, id="unparseable-time"),
])
def test_rows_rejected_with_reasons(tmp_path, capsys, extra_rows, want):
    summary, rejects = accounting(*encode(tmp_path, capsys, BASE + extra_rows))
    n_extra = extra_rows.count("\n")
    assert summary["rows_in"] == N_BASE + n_extra
    assert summary["rows_rejected"] == n_extra
    assert set(rejects["reason"]) <= want and set(rejects["reason"])
    assert sorted(rejects["source_row"]) == list(range(N_BASE + 1, N_BASE + n_extra + 1))


def test_duplicate_events(tmp_path, capsys):
    lines = BASE.splitlines()
    dupes = "\n".join([lines[1], lines[2], lines[1]]) + "\n"
    summary, rejects = accounting(*encode(tmp_path, capsys, BASE + dupes))
    assert summary["rejects_by_reason"] == {"duplicate_event": 3}
    assert rejects["detail"].tolist() == ["same as row 1", "same as row 2", "same as row 1"]
    # --duplicates keep keeps them all
    summary, rejects = accounting(*encode(tmp_path, capsys, BASE + dupes,
                                          extra=["--duplicates", "keep"]))
    assert summary["rows_kept"] == N_BASE + 3


def test_far_future_and_far_past_iso(tmp_path, capsys):
    ev = events_text(time_fmt=iso)
    extra = ("L1,2999-01-01T00:00:00Z,open_chart\nL1,1600-01-01T00:00:00Z,open_chart\n"
             "L1,9999-12-31T23:59:59+14:00,open_chart\nL1,0001-01-01T00:00:00-12:00,open_chart\n")
    summary, rejects = accounting(*encode(tmp_path, capsys, ev + extra))
    assert summary["rejects_by_reason"] == {"time_out_of_range": 4}
    assert summary["time_kind"] == "iso"


def test_time_zones_convert_to_utc(tmp_path, capsys):
    # the same instants written in three zones give the same encoded times
    runs = {}
    for zone, shift in (("Z", 0), ("+02:00", 2), ("-05:00", -5)):
        def fmt(t, zone=zone, shift=shift):
            return f"2026-03-02T{9 + shift:02d}:{t // 60:02d}:{t % 60:02d}{zone}"
        d = tmp_path / f"z{shift}"
        d.mkdir()
        summary, _ = accounting(*encode(d, capsys, events_text(time_fmt=fmt)))
        runs[zone] = SequenceDB.load(d / "out" / "sequences")
    base = runs["Z"]
    for db in runs.values():
        np.testing.assert_array_equal(db.times, base.times)
        np.testing.assert_array_equal(db.tokens, base.tokens)
    # a column mixing zones is one time kind: nothing rejected
    mixed = events_text(time_fmt=iso) + ("L1,2026-03-02T11:30:00+02:00,open_chart\n"
                                        "L2,2026-03-02T04:30:00-05:00,open_chart\n")
    d = tmp_path / "mixed"
    d.mkdir()
    summary, rejects = accounting(*encode(d, capsys, mixed))
    assert len(rejects) == 0
    ev = load_events(d / "events.csv").events
    t = ev.loc[ev["source_row"].isin([N_BASE + 1, N_BASE + 2]), "time"].to_numpy()
    assert t.tolist() == [pd.Timestamp("2026-03-02T09:30:00Z").timestamp()] * 2


def test_clock_going_backwards_within_a_learner(tmp_path, capsys):
    extra = "L0,3,set_light\nL0,1,set_water\n"  # earlier than L0's events at 10..70
    rc, err, out = encode(tmp_path, capsys, BASE + extra)
    summary, rejects = accounting(rc, err, out)
    assert len(rejects) == 0 and summary["rows_out_of_order"] == 2
    db = SequenceDB.load(out / "sequences")
    for i in range(db.n_sequences):  # sorted into place, never dropped
        t = db.times[db.offsets[i]:db.offsets[i + 1]]
        assert np.all(np.diff(t) >= 0)
    s0 = list(db.learners).index("L0")
    assert db.decode(s0)[:2] == ["add_seedling", "set_water"]


def test_learner_with_one_event_and_learners_without_outcomes(tmp_path, capsys):
    extra = "L0x,5,open_chart\nNOBODY,6,open_chart\n"
    outcomes = OUTCOMES + "L0x,1,9,10\n"
    summary, _ = accounting(*encode(tmp_path, capsys, BASE + extra, outcomes))
    db = SequenceDB.load(tmp_path / "out" / "sequences")
    lens = dict(zip(db.learners, db.lengths))
    assert lens["L0x"] == 1  # a one-event learner is a sequence of length 1
    assert summary["events_without_outcome"] == 1  # NOBODY: kept, no group
    assert db.groups[list(db.learners).index("NOBODY")] == -1


def test_jsonl_bad_lines_are_rejected_rows(tmp_path, capsys):
    good = [json.dumps({"learner": f"L{i}", "time": 10 * j + i,
                        "action": ACTIONS[(i * j + j) % 6]})
            for i in range(N_LEARNERS) for j in range(PER_LEARNER)]
    bad = ["{not json", "[1, 2, 3]", '{"learner": "L1", "time": ' + "1" * 5000 + ', "action": "x"}',
           "[" * 50_000, '"just a string"']
    rc, err, out = encode(tmp_path, capsys, "\n".join(good + bad) + "\n", name="events.jsonl")
    summary, rejects = accounting(rc, err, out)
    assert summary["rejects_by_reason"] == {"bad_json": 5}


def test_xapi_statement_without_verb(tmp_path, capsys):
    def st(i, j, verb=True):
        s = {"actor": {"account": {"name": f"L{i}"}}, "object": {"id": "http://x/pot1"},
             "timestamp": iso(10 * j + i)}
        if verb:
            s["verb"] = {"id": f"http://x/verbs/{ACTIONS[(i * j + j) % 6]}"}
        return s
    sts = [st(i, j) for i in range(N_LEARNERS) for j in range(PER_LEARNER)] + [st(1, 99, False)]
    summary, rejects = accounting(*encode(tmp_path, capsys, json.dumps(sts), name="events.json"))
    assert reasons(rejects) == {N_BASE + 1: "bad_statement"}


# ==================================================================== outcomes
@pytest.mark.parametrize("outcomes, needles", [
    pytest.param(OUTCOMES + "L9,nan,2,10\n", ["outcomes.csv", "row 7", "pre", "not a number"],
                 id="nan-score"),
    pytest.param(OUTCOMES + "L9,,2,10\n", ["outcomes.csv", "row 7", "not a number"],
                 id="empty-score"),
    pytest.param(OUTCOMES.replace("L0,2,", "L0,-2,"), ["row 1", "negative"], id="negative-score"),
    pytest.param(OUTCOMES.replace("L0,2,3,10", "L0,2,30,10"), ["row 1", "above max"],
                 id="over-max-score"),
    pytest.param(OUTCOMES.replace("L0,2,3,10", "L0,0,0,0"), ["row 1", "max must be positive"],
                 id="zero-max"),
    pytest.param(OUTCOMES + "L0,1,2,10\n", ["learner 'L0'", "rows 1, 7"], id="duplicate-learner"),
    pytest.param(OUTCOMES + ",1,2,10\n", ["row 7", "empty learner"], id="empty-learner"),
    pytest.param("learner,grade\nL0,A\n", ["cannot tell the outcome form"], id="unknown-form"),
    pytest.param("learner,label\nL0,a\nL1,\n", ["row 2", "empty label"], id="empty-label"),
    pytest.param((OUTCOMES + "L\xe9,1,2,10\n").encode("latin-1"), ["not valid UTF-8"],
                 id="latin-1"),
    pytest.param("", ["outcomes file is empty"], id="empty-file"),
    pytest.param("learner,pre,post,max\n", ["no rows below the header"], id="header-only"),
    pytest.param("learner,label\n" + "".join(f"L{i},same\n" for i in range(6)),
                 ["only one group", "'same'"], id="one-label-for-all"),
    pytest.param("learner,label\n" + "".join(f"L{i},{'b' if i == 0 else 'a'}\n" for i in range(6)),
                 ["Group 'b' has 1 learner", "--grouping"], id="every-group-empty-but-one"),
    pytest.param("learner,pre,post,max\nL0,1,2,10\nZ1,1,5,10\nZ2,1,6,10\n",
                 ["Group 'strong' has 0 learner"], id="outcomes-mostly-for-unknown-learners"),
    pytest.param("learner,pre,post,max\nZ1,1,5,10\nZ2,1,6,10\n",
                 ["No learner has both events and a group"], id="no-learner-matches"),
])
def test_outcomes_fatal(tmp_path, capsys, outcomes, needles):
    rc, err, _ = encode(tmp_path, capsys, BASE, outcomes)
    assert_one_error(rc, err, *needles)


def test_outcomes_for_unknown_learners_and_ceiling(tmp_path, capsys):
    outcomes = OUTCOMES.replace("L5,2,8,10", "L5,10,10,10") + "GHOST,1,5,10\n"
    summary, _ = accounting(*encode(tmp_path, capsys, BASE, outcomes))
    assert summary["outcomes_without_events"] == 1  # GHOST: listed, not an error
    assert summary["outcome_undefined"] == 1  # pre == max: no gain, no group, counted
    assert sum(summary["learners_per_group"].values()) == N_LEARNERS - 1


def test_thresholds_leave_one_group_empty(tmp_path, capsys):
    rc, err, _ = encode(tmp_path, capsys, BASE, extra=["--grouping", "thresholds",
                                                      "--low", "0", "--high", "0.1"])
    assert_one_error(rc, err, "Group 'weak' has 0 learner")


# ===================================================================== mapping
@pytest.mark.parametrize("mapping, needles", [
    pytest.param(None, ["map.csv", "mapping file not found"], id="missing"),
    pytest.param("from,to\nset_light,settings\n", ["map.csv", "'action' and 'symbol'"],
                 id="wrong-columns"),
    pytest.param("action,symbol\nset_light,a\nset_light,b\n", ["'set_light'", "more than once"],
                 id="duplicate-action"),
    pytest.param("action,symbol\nset_light,pause:long\n", ["reserved prefix"], id="reserved-prefix"),
    pytest.param(b"action,symbol\nset_light,r\xe9glage\n", ["map.csv", "not valid UTF-8"],
                 id="latin-1"),
    pytest.param('action,symbol\n"set_light,x\n', ["map.csv", "malformed mapping CSV"],
                 id="truncated-quote"),
    pytest.param("", ["map.csv", "malformed mapping CSV"], id="empty"),
])
def test_mapping_fatal(tmp_path, capsys, mapping, needles):
    m = tmp_path / "map.csv"
    if mapping is not None:
        _write(m, mapping)
    rc, err, _ = encode(tmp_path, capsys, BASE, extra=["--mapping", m])
    assert_one_error(rc, err, *needles)


def test_mapping_with_bom_and_drops(tmp_path, capsys):
    m = _write(tmp_path / "map.csv", "\ufeffaction,symbol\nset_light,settings\nset_water,settings\n"
                                     "open_chart,\n")
    summary, _ = accounting(*encode(tmp_path, capsys, BASE, extra=["--mapping", m]))
    db = SequenceDB.load(tmp_path / "out" / "sequences")
    assert "settings" in db.vocab and "set_light" not in db.vocab and "open_chart" not in db.vocab


# ============================================================ configuration
CONFIG_CASES = {
    "syntax": ("[mine\nmin_support = 0.2\n", ["bad.toml", "not valid TOML", "line 1"]),
    "unknown-key": ("[mine]\nmin_suport = 0.2\n", ["'mine.min_suport'", "'mine.min_support'"]),
    "unknown-section": ("[mining]\nx = 1\n", ["'mining'", "Did you mean 'mine'"]),
    "section-as-value": ("mine = 3\n", ["[mine] must be a table"]),
    "string-for-number": ('[mine]\nmin_support = "a lot"\n', ["'mine.min_support'", "a number"]),
    "string-seed": ('seed = "x"\n', ["option 'seed'", "whole number"]),
    "float-for-int": ("[encode]\npause_bins = 2.5\n", ["'encode.pause_bins'", "whole number"]),
    "string-for-bool": ('[report]\nexamples = "no"\n', ["'report.examples'", "true or false"]),
    "string-for-list": ('[encode]\nimplicit_pauses = "short"\n', ["'encode.implicit_pauses'"]),
    "out-of-range": ("[mine]\nmin_support = 3.0\n", ["min_support", "(0, 1]"]),
    "latin-1": (b'[encode]\ntemplate = "caf\xe9 {action}"\n', ["bad.toml", "not valid UTF-8"]),
    "template-attribute": ('[encode]\ntemplate = "{action.__class__}"\n',
                           ["{action.__class__}", "allowed fields"]),
    "template-unclosed": ('[encode]\ntemplate = "{action"\n', ["malformed"]),
    "bad-delimiter": ('[events]\ndelimiter = ";;"\n', ["one character"]),
    "bad-encoding": ('[events]\nencoding = "klingon"\n', ["'klingon'"]),
    "zero-jobs": ("n_jobs = 0\n", ["bad.toml", "'n_jobs' parameter", "-1 (all cores)"]),
    "missing-key-file": ('[privacy]\npseudonymize_key = "nokey.txt"\n', ["nokey.txt", "not found"]),
}


@pytest.mark.parametrize("case", sorted(CONFIG_CASES))
def test_config_fatal(tmp_path, capsys, case):
    text, needles = CONFIG_CASES[case]
    cfg = _write(tmp_path / "bad.toml", text)
    ev = _write(tmp_path / "events.csv", BASE)
    oc = _write(tmp_path / "outcomes.csv", OUTCOMES)
    rc, _, err = _run(capsys, ["analyze", ev, "--outcomes", oc, "--out", tmp_path / "o", "-q",
                               "--no-phases", "--no-validate", "--config", cfg])
    assert_one_error(rc, err, *needles)
    assert not (tmp_path / "o" / "report.html").exists()


def test_jobs_flag_checked_before_any_work(tmp_path, capsys):
    ev = _write(tmp_path / "events.csv", BASE)
    oc = _write(tmp_path / "outcomes.csv", OUTCOMES)
    rc, _, err = _run(capsys, ["analyze", ev, "--outcomes", oc, "--out", tmp_path / "o", "-q",
                               "--jobs", "0"])
    assert_one_error(rc, err, "command line", "'n_jobs' parameter", "-1 (all cores)")
    assert not (tmp_path / "o").exists()


def test_config_missing_file(tmp_path, capsys):
    rc, _, err = _run(capsys, ["analyze", tmp_path / "e.csv", "--outcomes", tmp_path / "o.csv",
                               "--out", tmp_path / "o", "--config", tmp_path / "none.toml"])
    assert_one_error(rc, err, "none.toml", "not found")


# ========================================================= end-to-end analyze
FAST = ["--no-phases", "--no-validate", "-q"]


def test_analyze_keeps_row_accounting_with_bad_rows(tmp_path, capsys):
    # a config with a byte-order mark, duplicate/controls/long/out-of-range rows, and
    # timings so regular that quantile pause edges tie (a former export failure)
    cfg = _write(tmp_path / "c.toml", "\ufeff[contrast]\nn_bootstrap = 5\n")
    extra = ("L1,500\nL1,501,open\x07chart\nL1,1e13,open_chart\n" + BASE.splitlines()[3] + "\n")
    ev = _write(tmp_path / "events.csv", BASE + extra)
    oc = _write(tmp_path / "outcomes.csv", OUTCOMES + "GHOST,1,5,10\n")
    out = tmp_path / "o"
    rc, _, err = _run(capsys, ["analyze", ev, "--outcomes", oc, "--out", out, "--config", cfg, *FAST])
    summary, rejects = accounting(rc, err, out)
    assert summary["rows_rejected"] == 4 and summary["outcomes_without_events"] == 1
    assert (out / "report.html").exists() and (out / "detectors.json").exists()


@pytest.mark.parametrize("extra, needles", [
    # every action is frequent at the default support (1 of 3 sequences): the miner's
    # candidate tables would need 20000 x 20001 cells
    pytest.param([], ["Mining stopped", "--min-support", "--mapping"], id="mining"),
    # no action is frequent: the dense transition tables would need 2 x 20000^2 cells
    # (every gap is the same, so there are no pause tokens: pause_bins_reduced)
    pytest.param(["--min-support", "0.5"], ["20000 distinct tokens", "--mapping"],
                 id="transitions"),
])
def test_analyze_too_many_distinct_actions(tmp_path, capsys, extra, needles):
    # 20 000 distinct actions stop with a message naming the fix, in seconds, before
    # memory runs out (10^6 distinct actions are measured in docs/reliability.md)
    n = 20_000
    rows = ["learner,time,action"] + [f"L{i % N_LEARNERS},{i},act_{i}" for i in range(n)]
    ev = _write(tmp_path / "events.csv", "\n".join(rows) + "\n")
    oc = _write(tmp_path / "outcomes.csv", OUTCOMES)
    t0 = time.perf_counter()
    rc, _, err = _run(capsys, ["analyze", ev, "--outcomes", oc, "--out", tmp_path / "o", *FAST,
                               *extra])
    assert_one_error(rc, err, *needles)
    assert time.perf_counter() - t0 < 60


def test_encode_many_distinct_actions(tmp_path, capsys):
    # 10^5 distinct actions encode in seconds (10^6 measured in docs/reliability.md)
    n = 100_000
    rows = ["learner,time,action"] + [f"L{i % N_LEARNERS},{i},act_{i}" for i in range(n)]
    t0 = time.perf_counter()
    summary, _ = accounting(*encode(tmp_path, capsys, "\n".join(rows) + "\n"))
    assert summary["vocabulary"] >= n and time.perf_counter() - t0 < 60


# =================================================================== detectors
DETECTORS = {
    "format": "seqmine-detectors", "version": 1,
    "encoding": {"template": "{action}", "pause": {
        "strategy": "fixed", "edges": [30.0], "labels": ["short", "long"],
        "implicit": ["short"]}},
    "matching": {"max_gap": 0, "max_window": None, "skip_pauses": True},
    "detectors": [{"id": "D1", "tokens": ["set_light", "advance_week"],
                   "direction": "discourage", "hint": "Change one setting at a time."}],
}


def _detectors(**changes):
    doc = json.loads(json.dumps(DETECTORS))
    for dotted, value in changes.items():
        *path, last = dotted.split("__")
        obj = doc
        for key in path:
            obj = obj[int(key)] if isinstance(obj, list) else obj[key]
        if value is _DELETE:
            del obj[last]
        else:
            obj[last] = value
    return json.dumps(doc)


_DELETE = object()
GOOD_LINES = [json.dumps({"learner": "L1", "time": t, "action": a})
              for t, a in ((0, "set_light"), (5, "advance_week"), (9, "set_light"),
                           (12, "advance_week"))]


@pytest.mark.parametrize("content, needles", [
    pytest.param(None, ["det.json", "not found", "seqmine detectors"], id="missing"),
    pytest.param("", ["det.json", "not valid JSON", "line 1"], id="empty"),
    pytest.param(_detectors()[:-20], ["det.json", "not valid JSON", "line"], id="truncated"),
    pytest.param(_detectors().replace('"max_gap": 0', '"max_gap": NaN'),
                 ["det.json", "NaN", "null"], id="nan-constant"),
    pytest.param("[" * 100_000, ["det.json", "nested too deeply"], id="deep-nesting"),
    pytest.param(b"\xff\xfe{}", ["det.json", "not UTF-8"], id="not-utf-8"),
    pytest.param("[]", ["det.json", "JSON object"], id="array"),
    pytest.param(_detectors(format="other"), ["format", "not a seqmine detectors file"],
                 id="wrong-format"),
    pytest.param(_detectors(version=7), ["version 7 is newer"], id="newer-version"),
    pytest.param(_detectors(detectors__0__tokens=_DELETE), ["detectors[0].tokens", "missing"],
                 id="detector-without-tokens"),
    pytest.param(_detectors(detectors__0__tokens=[]), ["detectors[0].tokens", "non-empty"],
                 id="empty-tokens"),
    pytest.param(_detectors(detectors__0__colour="red"), ["detectors[0].colour", "unknown field"],
                 id="unknown-field"),
    pytest.param(_detectors(detectors__0__direction="maybe"), ["detectors[0].direction"],
                 id="bad-direction"),
    pytest.param(_detectors(detectors__0__tokens=["set_light", "pause:short"]),
                 ["detectors[0].tokens[1]", "implicit pause"], id="implicit-pause-token"),
    pytest.param(_detectors(encoding__pause__edges=[30.0, 30.0]),
                 ["encoding.pause.edges", "strictly ascending"], id="fixed-edges-tied"),
    pytest.param(_detectors(encoding__template="{action.__class__}"), ["encoding.template"],
                 id="template-attribute"),
    pytest.param(_detectors(matching__max_gap=-1), ["matching.max_gap"], id="negative-gap"),
])
def test_detectors_file_fatal(tmp_path, capsys, content, needles):
    det = tmp_path / "det.json"
    if content is not None:
        _write(det, content)
    ev = _write(tmp_path / "ev.jsonl", "\n".join(GOOD_LINES) + "\n")
    rc, out, err = _run(capsys, ["watch", det, ev])
    assert_one_error(rc, err, *needles)
    assert out == ""


def test_detectors_file_with_bom_and_tied_quantile_edges(tmp_path, capsys):
    # tied quantile edges are what the encoder learns from regular timings
    det = _write(tmp_path / "det.json", "\ufeff" + _detectors(
        encoding__pause__strategy="quantile", encoding__pause__edges=[10.0, 10.0],
        encoding__pause__labels=["short", "medium", "long"]))
    ev = _write(tmp_path / "ev.jsonl", "\n".join(GOOD_LINES) + "\n")
    rc, out, err = _run(capsys, ["watch", det, ev])
    assert rc == 0, err
    assert [json.loads(x)["detector"] for x in out.splitlines()] == ["D1", "D1"]


# ============================================================ live JSON lines
BAD_LINES = [  # (words of the stderr line, the line)
    ("malformed JSON", '{"learner": "L1", "time": 1'),
    ("not a JSON object", '[1, 2, 3]'),
    ("too many digits", '{"learner": "L1", "time": ' + "1" * 5000 + ', "action": "x"}'),
    ("nested too deeply", "[" * 100_000),
    ("missing field 'action'", '{"learner": "L1", "time": 2}'),
    ("neither ISO 8601 nor numeric", '{"learner": "L1", "time": "noon", "action": "x"}'),
    ("before 1970 or after 2100", '{"learner": "L1", "time": "2999-01-01T00:00:00Z", "action": "x"}'),
    ("not a finite number", '{"learner": "L1", "time": 1e999, "action": "x"}'),
    ("not a finite number", '{"learner": "L1", "time": ' + "9" * 400 + ', "action": "x"}'),
    ("control characters", '{"learner": "L1", "time": 3, "action": "set\\u0007light"}'),
    ("characters long", json.dumps({"learner": "L1", "time": 3, "action": "x" * 500})),
    ("'action' is empty", '{"learner": "L1", "time": 3, "action": "  "}'),
    ("must be a string", '{"learner": ["L1"], "time": 3, "action": "x"}'),
    ("use one time format", '{"learner": "L1", "time": "2026-03-02T09:00:00Z", "action": "x"}'),
]


def test_watch_skips_each_bad_line_and_keeps_going(tmp_path, capsys):
    # good events interleaved with every kind of bad line: each bad one gets exactly
    # one stderr line naming file:line and is skipped; the firings are unchanged
    lines = [GOOD_LINES[0]] + [line for _, line in BAD_LINES] + GOOD_LINES[1:]
    ev = _write(tmp_path / "ev.jsonl", "\n".join(lines) + "\n")
    det = _write(tmp_path / "det.json", _detectors())
    rc, out, err = _run(capsys, ["watch", det, ev, "--summary"])
    assert rc == 0, err
    assert [json.loads(x)["time"] for x in out.splitlines()] == [5, 12]
    err_lines = [ln for ln in err.splitlines() if "event skipped" in ln]
    assert len(err_lines) == len(BAD_LINES)
    for k, ((needle, _), ln) in enumerate(zip(BAD_LINES, err_lines)):
        assert ln.startswith(f"seqmine watch: {ev}:{k + 2}: ")
        assert needle in ln, ln
    assert f"rejected={len(BAD_LINES)}" in err


def test_watch_backwards_duplicates_bom_and_bad_bytes(tmp_path, capsys):
    lines = [GOOD_LINES[0], GOOD_LINES[0],  # duplicate
             json.dumps({"learner": "L1", "time": -50, "action": "set_light"}),  # backwards
             *GOOD_LINES[1:]]
    raw = ("\ufeff" + "\n".join(lines) + "\n").encode("utf-8")
    raw += b'{"learner": "L\xff\xfe", "time": 20, "action": "open_chart"}\n'  # not UTF-8
    ev = _write(tmp_path / "ev.jsonl", raw)
    det = _write(tmp_path / "det.json", _detectors())
    rc, out, err = _run(capsys, ["watch", det, ev])
    assert rc == 0, err
    assert [json.loads(x)["time"] for x in out.splitlines()] == [5, 12]
    skipped = [ln for ln in err.splitlines() if "event skipped" in ln]
    assert len(skipped) == 2
    assert ":2:" in skipped[0] and "duplicate" in skipped[0]
    assert ":3:" in skipped[1] and "before the learner's latest event" in skipped[1]
