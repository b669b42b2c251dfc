"""Tests of event-log loading: formats, times, ordering, rejects and row accounting."""

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.errors import ColumnError, DataFileError
from seqmine.inputs.load import REJECT_REASONS, load_events, parse_times

ROWS = [
    ("b", "2026-03-02T09:00:05Z", "set_light", "pot1"),
    ("a", "2026-03-02T09:00:01Z", "add_seedling", "pot1"),
    ("b", "2026-03-02T09:00:01Z", "set_water", "pot2"),
    ("a", "2026-03-02T09:00:09Z", "advance_week", ""),
]


def _write_csv(tmp_path, rows, header=("learner", "time", "action", "target"), sep=",",
               name="events.csv"):
    p = tmp_path / name
    lines = [sep.join(header)] + [sep.join(r) for r in rows]
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


def _expected_order(res):
    return res.events[["learner", "action"]].values.tolist()


def test_csv_sorted_per_learner_by_time(tmp_path):
    res = load_events(_write_csv(tmp_path, ROWS))
    assert _expected_order(res) == [["a", "add_seedling"], ["a", "advance_week"],
                                    ["b", "set_water"], ["b", "set_light"]]
    assert res.events["source_row"].tolist() == [2, 4, 3, 1]
    assert res.n_input == 4 and res.n_rejected == 0
    # b's second file row is earlier than its first: one out-of-order row
    assert res.n_out_of_order == 1


def test_ties_keep_file_order(tmp_path):
    rows = [("a", "5", "x", ""), ("a", "5", "y", ""), ("a", "1", "z", ""), ("a", "5", "w", "")]
    res = load_events(_write_csv(tmp_path, rows))
    assert res.events["action"].tolist() == ["z", "x", "y", "w"]


def test_tsv_and_sniffed_semicolon(tmp_path):
    tsv = load_events(_write_csv(tmp_path, ROWS, sep="\t", name="e.tsv"))
    semi = load_events(_write_csv(tmp_path, ROWS, sep=";", name="e.csv"))
    csv = load_events(_write_csv(tmp_path, ROWS, name="f.csv"))
    pd.testing.assert_frame_equal(tsv.events, csv.events)
    pd.testing.assert_frame_equal(semi.events, csv.events)


def test_bom_is_skipped(tmp_path):
    p = tmp_path / "bom.csv"
    p.write_bytes("\ufefflearner,time,action\na,1,x\n".encode("utf-8"))
    assert load_events(p).events["learner"].tolist() == ["a"]


def test_parquet_equals_csv(tmp_path):
    pytest.importorskip("pyarrow")
    df = pd.DataFrame(ROWS, columns=["learner", "time", "action", "target"])
    p = tmp_path / "e.parquet"
    df.to_parquet(p, row_group_size=2)
    pd.testing.assert_frame_equal(load_events(p).events,
                                  load_events(_write_csv(tmp_path, ROWS)).events)


def test_jsonl_with_bad_line(tmp_path):
    p = tmp_path / "e.jsonl"
    lines = [json.dumps(dict(zip(["learner", "time", "action", "target"], r))) for r in ROWS]
    lines.insert(2, "{not json")
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    res = load_events(p)
    assert res.n_input == 5 and res.n_kept == 4
    assert res.rejects.values.tolist() == [[3, "bad_json", ""]]
    pd.testing.assert_frame_equal(
        res.events.drop(columns="source_row"),
        load_events(_write_csv(tmp_path, ROWS)).events.drop(columns="source_row"))


def test_xapi_statements(tmp_path):
    # Statement shape of the open xAPI specification: actor, verb, object, timestamp.
    st_ = [
        {"actor": {"account": {"homePage": "https://lms.example", "name": "a"}},
         "verb": {"id": "https://example.org/verbs/set_light", "display": {"en-US": "set_light"}},
         "object": {"id": "https://example.org/pots/pot1"},
         "timestamp": "2026-03-02T09:00:05+00:00",
         "context": {"registration": "ec531277-b57b-4c15-8d91-d292c5b2b8f7"}},
        {"actor": {"mbox": "mailto:b@example.org"},
         "verb": {"id": "https://example.org/verbs/measure_height"},
         "object": {"id": "https://example.org/pots/pot2",
                    "definition": {"name": {"en-US": "pot2"}}},
         "timestamp": "2026-03-02T09:00:07Z"},
        {"actor": {"mbox": "mailto:c@example.org"}, "verb": {}, "object": {}},
    ]
    p = tmp_path / "statements.json"
    p.write_text(json.dumps(st_), encoding="utf-8")
    res = load_events(p)
    ev = res.events
    assert ev["learner"].tolist() == ["a", "b@example.org"]
    assert ev["action"].tolist() == ["set_light", "measure_height"]
    assert ev["target"].tolist() == ["pot1", "pot2"]
    assert ev["session"].tolist()[0] == "ec531277-b57b-4c15-8d91-d292c5b2b8f7"
    assert res.rejects.values.tolist() == [[3, "bad_statement", ""]]
    # {"statements": [...]} as returned by a statement store, too
    p2 = tmp_path / "store.json"
    p2.write_text(json.dumps({"statements": st_[:2]}), encoding="utf-8")
    assert load_events(p2).n_kept == 2


@pytest.mark.parametrize("text,expected", [
    ("2026-03-02T09:00:00Z", 1772442000.0),
    ("2026-03-02T10:00:00+01:00", 1772442000.0),
    ("2026-03-02T09:00:00", 1772442000.0),          # no zone: taken as UTC
    ("2026-03-02 09:00:00.500", 1772442000.5),
    ("2026-03-02", 1772409600.0),
])
def test_iso_forms(text, expected):
    # reference: Python's datetime for the same instant
    import datetime as dt
    ref = dt.datetime(2026, 3, 2, 9, tzinfo=dt.timezone.utc).timestamp()
    assert ref == 1772442000.0
    s, r, k = parse_times([text])
    assert k == "iso" and r[0] is None and s[0] == pytest.approx(expected)


def test_numeric_seconds_and_mixed_forms():
    s, r, k = parse_times(["1.5", "20", "2026-03-02T09:00:00Z", "", "soon"])
    assert k == "numeric"
    assert s[:2].tolist() == [1.5, 20.0]
    assert list(r) == [None, None, "mixed_time_format", "missing_time", "bad_time"]


def test_far_times_rejected():
    s, r, k = parse_times(["1900-01-01T00:00:00Z", "2026-01-01T00:00:00Z", "2199-01-01T00:00:00Z"])
    assert list(r) == ["time_out_of_range", None, "time_out_of_range"]


def test_every_reject_reason_and_accounting(tmp_path):
    rows = [
        ("a", "1", "x", ""),                 # 1 ok
        ("", "2", "x", ""),                  # 2 missing_learner
        ("a", "3", "", ""),                  # 3 missing_action
        ("a", "", "x", ""),                  # 4 missing_time
        ("a", "later", "x", ""),             # 5 bad_time
        ("a", "2026-01-01T00:00:00Z", "x", ""),  # 6 mixed_time_format
        ("a", "1e300", "x", ""),             # 7 time_out_of_range
        ("a", "8", "x\x07y", ""),            # 8 control_characters
        ("a", "9", "x" * 201, ""),           # 9 action_too_long
        ("a", "1", "x", ""),                 # 10 duplicate_event of row 1
    ]
    res = load_events(_write_csv(tmp_path, rows))
    got = dict(zip(res.rejects["source_row"], res.rejects["reason"]))
    assert got == {2: "missing_learner", 3: "missing_action", 4: "missing_time",
                   5: "bad_time", 6: "mixed_time_format", 7: "time_out_of_range",
                   8: "control_characters", 9: "action_too_long", 10: "duplicate_event"}
    assert set(got.values()) | {"bad_json", "bad_statement", "bad_fields"} == set(REJECT_REASONS)
    assert res.rejects.loc[res.rejects.source_row == 10, "detail"].item() == "same as row 1"
    assert res.n_kept + res.n_rejected == res.n_input == 10
    assert load_events(_write_csv(tmp_path, rows), duplicates="keep").n_kept == 2


def test_column_names_are_options(tmp_path):
    p = _write_csv(tmp_path, ROWS, header=("student", "ts", "verb", "object"))
    res = load_events(p, columns={"learner": "student", "time": "ts", "action": "verb",
                                  "target": "object"})
    assert res.n_kept == 4 and res.events["target"].tolist()[0] == "pot1"


def test_missing_column_suggests_close_name(tmp_path):
    p = _write_csv(tmp_path, ROWS, header=("Learner", "time", "action", "target"))
    with pytest.raises(ColumnError, match=r"'learner' is missing.*Did you mean 'Learner'.*--learner-column"):
        load_events(p)


def test_one_column_header_hints_delimiter(tmp_path):
    p = tmp_path / "e.csv"
    p.write_text("learner:time:action\na:1:x\n", encoding="utf-8")
    with pytest.raises(ColumnError, match="missing"):
        load_events(p)


@pytest.mark.parametrize("content,match", [
    (b"", "empty"),
    (b"learner,time,action\n", "no data rows"),
    (b"learner,time,action\n\xff\xfe,1,x\n", "not valid utf-8"),
    (b"learner,time,action\n,1,x\n,2,y\n", "all 2 rows were rejected.*missing_learner"),
])
def test_bad_files(tmp_path, content, match):
    p = tmp_path / "bad.csv"
    p.write_bytes(content)
    with pytest.raises(DataFileError, match=match):
        load_events(p)


def test_size_limit(tmp_path):
    p = _write_csv(tmp_path, ROWS)
    with pytest.raises(DataFileError, match="--max-bytes"):
        load_events(p, max_bytes=10)


@pytest.mark.filterwarnings("ignore::seqmine.errors.SeqmineWarning")  # many_rejected
@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["a", "b", "c", ""]),
                          st.one_of(st.integers(0, 50).map(str), st.sampled_from(["", "x"])),
                          st.sampled_from(["set", "run", ""])), min_size=1, max_size=30),
       st.randoms(use_true_random=False))
def test_accounting_and_shuffle_invariance(tmp_path_factory, rows, rnd):
    """kept + rejected == input always; shuffling the file keeps each learner's order."""
    d = tmp_path_factory.mktemp("acc")
    rows = [(lr, t, a, "") for lr, t, a in rows]
    try:
        res = load_events(_write_csv(d, rows), duplicates="keep")
    except DataFileError:
        return  # every row rejected: a documented error
    assert res.n_kept + res.n_rejected == len(rows)
    ev = res.events
    # within a learner, times are non-decreasing and ties stay in file order
    for _, part in ev.groupby("learner"):
        t = part["time"].to_numpy()
        assert np.all(np.diff(t) >= 0)
        same = np.diff(t) == 0
        assert np.all(np.diff(part["source_row"].to_numpy())[same] > 0)


def test_parquet_zone_aware_times_are_converted_to_utc(tmp_path):
    # regression: local times were written with a "Z" suffix, shifting them by the offset
    pytest.importorskip("pyarrow")
    t = pd.to_datetime(["2026-03-02T10:00:00+01:00"]).tz_convert("Europe/Paris")
    df = pd.DataFrame({"learner": ["a"], "time": t, "action": ["x"]})
    p = tmp_path / "e.parquet"
    df.to_parquet(p)
    assert load_events(p).events["time"].item() == 1772442000.0  # 09:00 UTC
