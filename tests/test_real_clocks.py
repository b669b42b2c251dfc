"""Real clocks and real exports: every hostile case has its exact message or reject reason.

The logs come from tests/_real_clock_logs.py (generated, seeded, greenhouse actions).
Row accounting (rows in = kept + rejected) is checked for every load.
"""

import gzip
import json
import re
import warnings
import zoneinfo
from pathlib import Path
from datetime import datetime, timezone

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import _real_clock_logs as logs
from seqmine.cli.main import main
from seqmine.demo_data import generate_greenhouse
from seqmine.detection.detectors import export_detectors
from seqmine.detection.watcher import Watcher, parse_event_time
from seqmine.encoding.encoder import Encoder
from seqmine.encoding.pauses import pause_ranges
from seqmine.errors import DataFileError, SeqmineWarning
from seqmine.inputs.clock import local_to_utc_seconds, read_times
from seqmine.inputs.load import load_events
from seqmine.inputs.outcomes import load_outcomes
from seqmine.pipeline import prepare_sequences, reconcile_inputs
from seqmine.reporting.pieces import _pause_bins


def _accounted(res):
    assert res.n_kept + res.n_rejected == res.n_input
    return res


def _load(path, **kw):
    """load_events, returning the result and the warnings it raised, by code."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = load_events(path, **kw)
    return _accounted(res), _by_code(caught)


def _by_code(caught):
    out = {}
    for w in caught:
        assert isinstance(w.message, SeqmineWarning), w.message
        out[w.message.code] = w.message
    return out


def _encode(events, **kw):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        enc = Encoder(**kw).fit(events)
        db = enc.transform(events)
    return enc, db, _by_code(caught)


def _within_gaps(db):
    """Gaps between consecutive action tokens inside each sequence (seconds)."""
    act = db.action_mask
    seq = db.seq_index[act]
    t = db.times[act]
    same = seq[1:] == seq[:-1]
    return (t[1:] - t[:-1])[same]


def _cli(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


# ===================================================================== one-second clock
@pytest.fixture(scope="module")
def course(tmp_path_factory):
    ev, oc = logs.one_second_course()
    folder = tmp_path_factory.mktemp("course")
    return logs.write(folder, ev, oc), len(ev)


def test_one_second_clock_over_weeks_keeps_distinct_positive_edges(course):
    (ev_path, _), n = course
    assert 90_000 <= n <= 110_000
    res, seen = _load(ev_path)
    assert res.clock["resolution"] == "second" and res.n_rejected == 0
    enc, db, enc_seen = _encode(res.events)
    # the old tertiles were [1.0, 1.0]: two thirds of the gaps are exactly one second
    assert len(enc.edges_) == 2 and 0 < enc.edges_[0] < enc.edges_[1]
    assert "pause_bins_reduced" not in enc_seen
    # sessions: a new sequence after 30 minutes without an action
    n_learners = res.events["learner"].nunique()
    assert db.n_sequences > 3 * n_learners
    assert _within_gaps(db).max() <= 1800
    ranges = pause_ranges(db.encoding)
    assert all(not re.search(r"\b0 s to under 0 s\b", t) for t in ranges.values())
    html = _pause_bins({"encoding": db.encoding})
    assert "0 s to under 0 s" not in html and "under 2 s" in html
    # the atom of one-second gaps stays whole in the shortest bin
    assert ranges == {"pause:short": "under 2 s",
                      "pause:medium": f"2 s to under {enc.edges_[1]:g} s",
                      "pause:long": f"{enc.edges_[1]:g} s or more"}


def test_one_second_clock_hint_drafts_name_the_pause_range(course):
    (ev_path, oc_path), _ = course
    res, _ = _load(ev_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SeqmineWarning)
        prepared = prepare_sequences(res, load_outcomes(oc_path), encoder=Encoder())
    db = prepared.db
    long_tok = "pause:long"
    table = pd.DataFrame({"pattern": [f"set_light > {long_tok} > reset"], "favours": ["weak"],
                          "q_value": [0.001], "cohens_h": [0.5], "stability": [0.9]})
    # a hand-made table without the evidence columns: select on q_value alone
    doc = export_detectors(table, db, {"max_gap": 0}, evidence=None)
    det = doc["detectors"][0]
    edge = db.encoding["pause"]["edges"][1]
    assert f"long pause ({edge:g} s or more)" in det["hint"]
    assert det["evidence"]["pause_ranges"] == {long_tok: f"{edge:g} s or more"}
    # the detectors file carries the session rule and the time reading
    assert doc["encoding"]["unit"] == "session" and doc["encoding"]["session_gap"] == 1800.0
    assert doc["encoding"]["time"] == {"unit": "s", "timezone": None}


# ===================================================================== day resolution
def test_day_resolution_times_warn_and_turn_pauses_off(tmp_path):
    ev, oc = logs.day_resolution_log()
    ev_path, _ = logs.write(tmp_path, ev, oc)
    res, seen = _load(ev_path)
    assert str(seen["coarse_times"]) == (
        f"{ev_path}: times in column 'time' are recorded to the day; gaps shorter than a "
        f"day cannot be measured, and actions within the same day keep their file order.")
    assert "tied_times" in seen and "keep" not in str(seen["tied_times"])
    assert re.search(r"of consecutive events of a learner share their time stamp",
                     str(seen["tied_times"]))
    dup = res.rejects["reason"].eq("duplicate_event").sum()
    assert dup > 0.3 * res.n_input  # separate clicks on one day look identical
    assert str(seen["duplicates_at_coarse_resolution"]) == (
        f"{ev_path}: {dup:,} row(s) were rejected as duplicates, but the clock only records "
        f"whole days, so separate actions in the same day look identical; if they are "
        f"separate actions, pass --duplicates keep.")
    assert seen["duplicates_at_coarse_resolution"].count == dup
    assert "many_rejected" in seen
    # within a 30-minute session every gap is 0 s: no pause token can mean anything
    enc, db, enc_seen = _encode(res.events)
    assert str(enc_seen["pause_bins_reduced"]) == (
        "The gaps within sequences take 1 distinct value(s) (0 s), too few for 3 pause "
        "bins on this clock; no pause tokens are written.")
    assert not db.is_pause.any() and len(enc.edges_) == 0
    # --duplicates keep keeps them all
    kept, _ = _load(ev_path, duplicates="keep")
    assert kept.n_rejected == 0


def test_day_resolution_without_sessions_keeps_meaningful_day_bins(tmp_path):
    ev, oc = logs.day_resolution_log()
    ev_path, _ = logs.write(tmp_path, ev, oc)
    res, _ = _load(ev_path, duplicates="keep")
    enc, db, seen = _encode(res.events, session_gap=None)
    # gaps are 0 s or whole days: every edge is a whole number of days, none is 0
    assert len(enc.edges_) >= 1 and all(e > 0 and e % 86400 == 0 for e in enc.edges_)
    assert "0 s to under 0 s" not in _pause_bins({"encoding": db.encoding})


# ===================================================================== heavy learner
def test_one_heavy_learner_moves_no_pause_edge_by_more_than_ten_percent(tmp_path):
    demo = generate_greenhouse(300, random_state=20261202)
    ev = demo.events.assign(time=demo.events["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ"))
    heavy = pd.concat([ev, logs.heavy_learner_events()], ignore_index=True)
    base, _ = _load(logs.write(tmp_path / "a", ev, demo.outcomes)[0])
    both, seen = _load(logs.write(tmp_path / "b", heavy, demo.outcomes)[0])
    med = both.events["learner"].value_counts().median()
    assert str(seen["heavy_learner"]) == (
        f"{both.path}: learner 'L9999' has 100,000 events, {100_000 / med:,.0f} times the "
        f"median of {med:,.0f} per learner (1 such learner(s)); pause bins weigh every "
        f"learner equally, but such a learner dominates mining time and transition counts; "
        f"check whether it is a test account or a script.")
    e0 = Encoder().fit(base.events).edges_
    e1 = Encoder().fit(both.events).edges_
    assert len(e0) == len(e1) == 2
    assert np.all(np.abs(e1 - e0) <= 0.1 * e0), (e0, e1)
    # gap-weighted tertiles (the old rule) are captured by the heavy learner's 1-2 s clicks
    gaps = np.diff(both.events["time"].to_numpy())[
        both.events["learner"].to_numpy()[1:] == both.events["learner"].to_numpy()[:-1]]
    assert np.quantile(gaps, 2 / 3) <= 2


# ===================================================================== numeric units
@pytest.mark.parametrize("unit,per_second,word", [("ms", 1000, "milliseconds"),
                                                  ("us", 1_000_000, "microseconds")])
def test_epoch_milliseconds_and_microseconds_are_recognised(tmp_path, unit, per_second, word):
    ev, oc = logs.numeric_log(unit)
    ev_path, _ = logs.write(tmp_path, ev, oc)
    res, seen = _load(ev_path)
    assert res.n_rejected == 0 and res.clock["time_unit"] == unit
    first = int(ev["time"].iloc[0])
    when = pd.Timestamp(first / per_second, unit="s", tz="UTC").isoformat().replace("+00:00", "Z")
    assert str(seen["time_unit_assumed"]) == (
        f"{ev_path}: Column 'time' holds numbers such as {first}; read as {word} since 1970 "
        f"({when}). Pass --time-unit s (or ms, us) if that is wrong.")
    assert res.events["time"].min() == pytest.approx(first / per_second)
    enc, _, _ = _encode(res.events)
    assert 1 < enc.edges_[0] < enc.edges_[1] < 60  # seconds, not thousands
    # said explicitly, nothing is assumed
    res2, seen2 = _load(ev_path, time_unit=unit)
    assert "time_unit_assumed" not in seen2
    assert np.array_equal(res2.events["time"], res.events["time"])


def test_epoch_milliseconds_read_as_seconds_say_which_unit(tmp_path):
    ev, oc = logs.numeric_log("ms")
    ev_path, _ = logs.write(tmp_path, ev, oc)
    with pytest.raises(DataFileError, match=re.escape(
            f"{ev_path}: all {len(ev)} rows were rejected (most often: time_out_of_range - the "
            f"time lies before 1970 or after 2100 (or is not finite)); the numbers do not "
            f"fit the unit given with --time-unit; try --time-unit auto, or s, ms or us.")):
        load_events(ev_path, time_unit="s")


def test_seconds_and_milliseconds_mixed_stop_with_example_rows(tmp_path, capsys):
    ev, oc = logs.mixed_seconds_milliseconds()
    ev_path, oc_path = logs.write(tmp_path, ev, oc)
    s_rows = ev.index[ev["learner"].str.startswith("n")][:2] + 1
    ms_rows = ev.index[ev["learner"].str.startswith("m")][:2] + 1
    msg = (f"{ev_path}: column 'time' mixes units of time since 1970 (seconds: "
           f"row {s_rows[0]}: {ev['time'][s_rows[0] - 1]}, row {s_rows[1]}: "
           f"{ev['time'][s_rows[1] - 1]}; milliseconds: row {ms_rows[0]}: "
           f"{ev['time'][ms_rows[0] - 1]}, row {ms_rows[1]}: {ev['time'][ms_rows[1] - 1]}); "
           f"reading it one way would lose the other rows. Convert the column to one unit, "
           f"or pass --time-unit s, ms or us to keep only the rows in that unit (the others "
           f"go to rejects.csv).")
    with pytest.raises(DataFileError) as exc:
        load_events(ev_path)
    assert str(exc.value) == msg
    rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out", tmp_path / "o")
    assert rc == 2 and err.strip() == f"seqmine: error: {msg}"
    # the explicit unit keeps its own rows and rejects the others, counted
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SeqmineWarning)
        res = _accounted(load_events(ev_path, time_unit="ms"))
    assert set(res.rejects["reason"]) == {"time_out_of_range"}
    assert res.n_rejected == ev["learner"].str.startswith("n").sum()
    assert res.rejects["detail"].iloc[0] == "not milliseconds since 1970 like the rest of the column"


def test_relative_milliseconds_are_recognised(tmp_path):
    ev, oc = logs.numeric_log("ms", relative=True)
    ev_path, _ = logs.write(tmp_path, ev, oc)
    res, seen = _load(ev_path)
    assert res.clock["time_unit"] == "ms"
    assert re.fullmatch(
        re.escape(f"{ev_path}: Column 'time' holds whole numbers with a typical gap of ")
        + r"[\d,]+" + re.escape(" between a learner's actions; read as milliseconds (relative "
                                "times). Pass --time-unit s if they are seconds."),
        str(seen["time_unit_assumed"]))
    enc, _, _ = _encode(res.events)
    assert enc.edges_[-1] < 60  # not the 5,000 s of milliseconds read as seconds
    as_seconds, seen_s = _load(ev_path, time_unit="s")
    assert "time_unit_assumed" not in seen_s
    assert np.allclose(as_seconds.events["time"], res.events["time"] * 1000)


# ===================================================================== decimal commas
def test_decimal_commas_stop_with_examples_and_the_fix(tmp_path, capsys):
    ev_path, oc_path = logs.decimal_comma_files(tmp_path)
    text = ev_path.read_text(encoding="utf-8").splitlines()[1:]
    commas = [(i + 1, line.split(";")[1]) for i, line in enumerate(text) if "," in line]
    shown = ", ".join(f"row {r}: {v!r}" for r, v in commas[:3])
    with pytest.raises(DataFileError, match=re.escape(
            f"{ev_path}: column 'time' has {len(commas):,} number(s) written with a decimal "
            f"comma ({shown}); re-save the file with decimal points (12.5) or pass "
            f"--decimal-comma.")):
        load_events(ev_path)
    pre = [line.split(";")[1] for line in oc_path.read_text().splitlines()[1:4]]
    with pytest.raises(DataFileError, match=re.escape(
            f"{oc_path}: column 'pre' has 30 number(s) written with a decimal comma (row 1: "
            f"{pre[0]!r}, row 2: {pre[1]!r}, row 3: {pre[2]!r}); re-save the file with "
            f"decimal points (0.5) or pass --decimal-comma.")):
        load_outcomes(oc_path)
    res, _ = _load(ev_path, decimal_comma=True)
    assert res.n_rejected == 0
    oc = load_outcomes(oc_path, decimal_comma=True)
    assert oc["pre"].iloc[0] == float(pre[0].replace(",", "."))
    rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out", tmp_path / "o",
                      "--decimal-comma", "-q")
    assert rc == 0, err


# ===================================================================== near-matching ids
def test_near_matching_ids_stop_with_examples_from_both_files(tmp_path, capsys):
    ev, oc = logs.near_matching_ids()
    ev_path, oc_path = logs.write(tmp_path, ev, oc)
    msg = (f"{ev_path} and {oc_path}: 20 learner id(s) almost match but differ in how they "
           f"are written (events '01' vs outcomes '1', events '010' vs outcomes '10', events "
           f"'02' vs outcomes '2'); make the ids identical in both files, or pass --match-ids "
           f"numeric to read 1, 01 and 1.0 as the same learner.")
    rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out", tmp_path / "o")
    assert rc == 2 and err.strip().splitlines()[-1] == f"seqmine: error: {msg}"
    rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out",
                      tmp_path / "o", "--match-ids", "numeric", "-q")
    assert rc == 0, err
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summary["events_without_outcome"] == 0 and summary["outcomes_without_events"] == 0


def test_near_matching_ids_by_case_name_the_plain_fix(tmp_path):
    ev = pd.DataFrame({"learner": ["Ann", "bo"], "time": ["1", "2"], "action": ["x", "y"]})
    oc = pd.DataFrame({"learner": ["ann", "bo"], "label": ["a", "b"]})
    ev_path, oc_path = logs.write(tmp_path, ev, oc)
    res = load_events(ev_path)
    with pytest.raises(DataFileError, match=re.escape(
            "1 learner id(s) almost match but differ in how they are written (events 'Ann' "
            "vs outcomes 'ann'); make the ids identical in both files (same case and "
            "spelling).")):
        reconcile_inputs(res, load_outcomes(oc_path))


# ===================================================================== local times
def _zoneinfo_seconds(text, zone):
    """Reference: Python's zoneinfo with fold=0 (the documented rule)."""
    wall = datetime.fromisoformat(text)
    return wall.replace(tzinfo=zoneinfo.ZoneInfo(zone)).astimezone(timezone.utc).timestamp()


def test_naive_local_times_across_daylight_saving_follow_zoneinfo(tmp_path):
    ev, oc = logs.dst_local_log()
    ev_path, _ = logs.write(tmp_path, ev, oc)
    res, seen = _load(ev_path, timezone="Europe/Berlin")
    got = res.events.sort_values("source_row")["time"].to_numpy()
    want = np.array([_zoneinfo_seconds(t, "Europe/Berlin") for t in ev["time"]])
    np.testing.assert_array_equal(got, want)
    wall = pd.to_datetime(ev["time"])
    skipped = ((wall >= "2026-03-29 02:00") & (wall < "2026-03-29 03:00")).sum()
    repeated = ((wall >= "2026-10-25 02:00") & (wall < "2026-10-25 03:00")).sum()
    assert skipped > 0 and repeated > 0
    assert res.clock["missing_local_times"] == skipped
    assert res.clock["ambiguous_local_times"] == repeated
    assert str(seen["missing_local_times"]) == (
        f"{ev_path}: {skipped:,} local time(s) fall in the hour skipped when Europe/Berlin "
        f"starts daylight-saving time; each was read with the offset before the change "
        f"(02:30 becomes 03:30).")
    assert str(seen["ambiguous_local_times"]) == (
        f"{ev_path}: {repeated:,} local time(s) fall in the hour repeated when Europe/Berlin "
        f"leaves daylight-saving time; each was read as its first occurrence (the offset "
        f"before the change).")
    # without the zone the same text is read as UTC (documented), one or two hours off
    utc, _ = _load(ev_path)
    offsets = got - utc.events.sort_values("source_row")["time"].to_numpy()
    assert set(np.unique(offsets)) <= {-7200.0, -3600.0}


@settings(max_examples=200, deadline=None)
@given(st.datetimes(min_value=datetime(1971, 1, 1), max_value=datetime(2099, 12, 31)),
       st.sampled_from(["Europe/Berlin", "America/New_York", "Australia/Lord_Howe",
                        "America/Sao_Paulo", "Asia/Kolkata"]))
def test_local_times_equal_zoneinfo(wall, zone):
    text = wall.isoformat(sep=" ")
    tc = read_times([text, text.replace(" ", "T")], timezone=zone)
    ref = _zoneinfo_seconds(text, zone)
    assert tc.seconds.tolist() == [ref, ref]
    # the live watcher reads it the same way
    assert parse_event_time(text, zone=zoneinfo.ZoneInfo(zone))[0] == ref


def test_unknown_time_zone_names_the_option(tmp_path):
    ev_path, _ = logs.write(tmp_path, *logs.dst_local_log())
    with pytest.raises(Exception, match=re.escape(
            "Unknown time zone 'Europe/Atlantis' for the 'timezone' option; use an IANA "
            "name such as 'Europe/Berlin'")):
        load_events(ev_path, timezone="Europe/Atlantis")


def test_local_to_utc_handles_every_change_of_a_year():
    zone = zoneinfo.ZoneInfo("America/New_York")
    minutes = pd.date_range("2026-01-01", "2027-01-01", freq="7min")
    got, amb, miss = local_to_utc_seconds(
        minutes.to_numpy().astype("datetime64[ns]").astype(np.int64), zone)
    want = [_zoneinfo_seconds(m.isoformat(), "America/New_York") for m in minutes]
    np.testing.assert_array_equal(got, want)
    assert amb.sum() and miss.sum()


# ===================================================================== compressed files
@pytest.mark.parametrize("name,fmt", [("events.csv.gz", "csv"), ("events.tsv.gz", "tsv"),
                                      ("events.jsonl.gz", "jsonl")])
def test_gzip_files_are_read_directly(tmp_path, name, fmt):
    ev, oc = logs.numeric_log("s", n_learners=5)
    ev["action"] = ev["action"] + "_é"  # accents survive
    plain = logs.write(tmp_path / "plain", ev, oc)[0]
    if fmt == "csv":
        text = ev.to_csv(index=False, lineterminator="\n")
    elif fmt == "tsv":
        text = ev.to_csv(index=False, sep="\t", lineterminator="\n")
    else:
        text = ev.to_json(orient="records", lines=True, force_ascii=False)
    path = tmp_path / name
    path.write_bytes(gzip.compress(text.encode("utf-8"), mtime=0))
    got, _ = _load(path)
    ref, _ = _load(plain)
    pd.testing.assert_frame_equal(got.events, ref.events)
    assert got.events["action"].str.endswith("_é").all()


def test_damaged_gzip_and_zip_say_so(tmp_path):
    bad = tmp_path / "events.csv.gz"
    bad.write_bytes(gzip.compress(b"learner,time,action\na,1,x\n")[:-12])
    with pytest.raises(DataFileError, match=r"the gzip data is damaged .*; compress the file again"):
        load_events(bad)
    z = tmp_path / "events.zip"
    z.write_bytes(b"PK\x03\x04" + b"\x00" * 40)
    with pytest.raises(DataFileError, match=r"is a zip archive; unzip it"):
        load_events(z)


@pytest.mark.parametrize("compress", ["bz2", "xz"])
def test_bzip2_and_xz_files_are_read_directly_events_and_outcomes(tmp_path, compress):
    # The compressors are Python's own (bz2, lzma); the loaded table must equal the
    # plain file's, whatever the file is called.
    import bz2
    import lzma

    pack = {"bz2": bz2.compress, "xz": lzma.compress}[compress]
    ev, oc = logs.numeric_log("s", n_learners=5)
    plain, plain_oc = logs.write(tmp_path / "plain", ev, oc)
    path = tmp_path / "events.data"  # no telling name: recognised by the first bytes
    path.write_bytes(pack(ev.to_csv(index=False, lineterminator="\n").encode("utf-8")))
    got, _ = _load(path)
    ref, _ = _load(plain)
    pd.testing.assert_frame_equal(got.events, ref.events)
    from seqmine.inputs.outcomes import load_outcomes

    packed_oc = tmp_path / f"outcomes.csv.{compress}"
    packed_oc.write_bytes(pack(Path(plain_oc).read_bytes()))
    pd.testing.assert_frame_equal(load_outcomes(packed_oc), load_outcomes(plain_oc),
                                  check_like=True)


def test_damaged_bzip2_and_zstandard_say_so(tmp_path):
    import bz2

    bad = tmp_path / "events.csv.bz2"
    bad.write_bytes(bz2.compress(b"learner,time,action\na,1,x\n" * 50)[:-20])
    with pytest.raises(DataFileError, match=r"the bzip2 data is damaged .*; compress the file again"):
        load_events(bad)
    z = tmp_path / "events.csv.zst"
    z.write_bytes(b"\x28\xb5\x2f\xfd" + b"\x00" * 40)
    with pytest.raises(DataFileError, match=r"Zstandard-compressed.*zstd -d"):
        load_events(z)


# ===================================================================== malformed rows
def test_a_row_with_too_many_fields_is_rejected_and_the_rest_loads(tmp_path):
    p = tmp_path / "events.csv"
    p.write_text('learner,time,action,target\na,1,x,\nb,2,y,"pot 1\n(left)"\na,3,y,pot,extra\n'
                 'b,4,z,\n', encoding="utf-8")
    res, _ = _load(p)
    # physical line 5 (the quoted line break makes record 3 start on line 5)
    assert res.rejects.values.tolist() == [[3, "bad_fields", "line 5: 5 field(s), expected 4"]]
    assert res.events["source_row"].tolist() == [1, 2, 4]


def test_too_few_fields_are_rejected_too(tmp_path):
    p = tmp_path / "events.csv"
    p.write_text("learner,time,action\na,1,x\nb,2\nb,4,z\n", encoding="utf-8")
    res, _ = _load(p)
    assert res.rejects.values.tolist() == [[2, "bad_fields", "line 3: 2 field(s), expected 3"]]


def test_an_unterminated_quote_takes_only_its_line(tmp_path):
    p = tmp_path / "events.csv"
    p.write_text('learner,time,action\na,1,x\nb,2,"open_chart\nb,3,y\na,4,"z"\n',
                 encoding="utf-8")
    res, _ = _load(p)
    assert res.rejects.values.tolist() == [
        [2, "bad_fields", "line 3: a quote opened on this line is never closed; reading "
                          "resumed on the next line"]]
    assert res.events.sort_values("source_row")["action"].tolist() == ["x", "y", "z"]


def test_a_quoted_field_with_a_line_break_that_breaks_the_width(tmp_path):
    p = tmp_path / "events.csv"
    p.write_text('learner,time,action\na,1,"x\ny",extra\nb,2,y\nb,3,"a""b"\n', encoding="utf-8")
    res, _ = _load(p)
    # the quotes pair up, so the record is two physical lines wide and one field too wide
    assert res.rejects.values.tolist() == [[1, "bad_fields", "line 2: 4 field(s), expected 3"]]
    assert res.events["action"].tolist() == ["y", 'a"b']


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["a", "b"]), st.integers(0, 99),
                          st.sampled_from(["x", "y,z", 'q"r', "two\nlines", ""]),
                          st.integers(2, 4)), min_size=1, max_size=25))
def test_wrong_widths_never_lose_rows(tmp_path_factory, rows):
    import csv
    import io
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["learner", "time", "action"])
    for learner, t, action, width in rows:
        w.writerow([learner, t, action, "extra"][:width])
    p = tmp_path_factory.mktemp("w") / "events.csv"
    p.write_text(buf.getvalue(), encoding="utf-8")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SeqmineWarning)
        try:
            res = load_events(p)
        except DataFileError as exc:
            assert "all" in str(exc) and "rejected" in str(exc) or "none of the" in str(exc)
            return
    _accounted(res)
    assert res.n_input == len(rows)
    bad = {i + 1 for i, r in enumerate(rows) if r[3] != 3}
    assert set(res.rejects.loc[res.rejects["reason"] == "bad_fields", "source_row"]) == bad


# ===================================================================== control characters
@pytest.mark.parametrize("action", ["set\tlight", "set\nlight", "set\rlight", "set\x85light"])
def test_tab_and_line_breaks_inside_actions_are_rejected(tmp_path, action):
    p = tmp_path / "events.csv"
    pd.DataFrame({"learner": ["a", "a"], "time": ["1", "2"], "action": [action, "run"]}).to_csv(
        p, index=False)
    res, _ = _load(p)
    assert res.rejects[["source_row", "reason"]].values.tolist() == [[1, "control_characters"]]


# ===================================================================== gaps on an edge
def test_gaps_exactly_on_an_edge_land_in_the_same_bin_offline_and_live():
    rng = np.random.default_rng(9)
    starts = 1.7e9 + rng.integers(0, 10**7, size=50) + rng.integers(0, 1000, size=50) / 1000
    rows = []
    for i, s0 in enumerate(starts):
        # gaps of exactly 0.3 s and 5.1 s, written as the float seconds a log would give
        t = [s0, s0 + 0.3, s0 + 0.3 + 5.1, s0 + 0.3 + 5.1 + 0.299]
        rows += [(f"e{i:02d}", float(f"{x:.3f}"), a) for x, a in zip(t, "wxyz")]
    ev = pd.DataFrame(rows, columns=["learner", "time", "action"])
    float_gaps = np.diff(ev["time"].to_numpy())[np.arange(len(ev) - 1) % 4 != 3]
    assert len(set(float_gaps.round(12))) > 3  # the float differences disagree
    enc = Encoder(pause_strategy="fixed", pause_thresholds=[0.3, 5.1], implicit_pauses=())
    db = enc.fit_transform(ev)
    for i in range(db.n_sequences):
        assert db.decode(i) == ["w", "pause:medium", "x", "pause:long", "y", "pause:short", "z"]
    doc = {"format": "seqmine-detectors", "version": 1, "encoding": db.encoding,
           "matching": {"max_gap": 0, "max_window": None, "skip_pauses": False},
           "detectors": [{"id": "D1", "tokens": ["w", "pause:medium", "x", "pause:long", "y"],
                          "direction": "discourage"}]}
    w = Watcher(doc, idle_timeout=None)
    fired = [f for _, r in ev.iterrows()
             for f in w.process({"learner": r["learner"], "time": r["time"],
                                 "action": r["action"]})]
    assert len(fired) == 50


# ===================================================================== matching warnings
def _prepare(ev, oc, tmp_path):
    ev_path, oc_path = logs.write(tmp_path, ev, oc)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prepared = prepare_sequences(load_events(ev_path), load_outcomes(oc_path),
                                     encoder=Encoder(pause_strategy="none"))
    return prepared, _by_code(caught), ev_path, oc_path


def test_learners_without_events_and_lopsided_groups_are_reported(tmp_path):
    ev, _ = logs.numeric_log("s", n_learners=40, per_learner=10)
    learners = sorted(ev["learner"].unique()) + ["ghost1", "ghost2"]
    oc = logs.outcomes_for(learners, seed=3, ties=True)
    prepared, seen, ev_path, oc_path = _prepare(ev, oc, tmp_path)
    assert str(seen["learners_without_events"]) == (
        f"2 learner(s) in {oc_path} have no usable events in {ev_path} (e.g. 'ghost1', "
        f"'ghost2'); they take no part in the analysis. Check the ids and rejects.csv.")
    per = prepared.summary["learners_per_group"]
    assert min(per.values()) < 2 / 3 * max(per.values())
    assert re.fullmatch(
        rf"The median split gives groups of unequal size \(strong {per['strong']}, weak "
        rf"{per['weak']} learners with events\); \d+ learners share the cut point 0\.5 and "
        r"the rule puts them all on one side; consider --grouping thresholds with cut points "
        r"of your own, or a finer outcome\.", str(seen["lopsided_groups"]))


def test_many_rejected_rows_are_reported(tmp_path):
    p = tmp_path / "events.csv"
    rows = [f"a,{i},{'x' if i % 3 else ''}" for i in range(30)]
    p.write_text("learner,time,action\n" + "\n".join(rows) + "\n", encoding="utf-8")
    res, seen = _load(p)
    assert str(seen["many_rejected"]) == (
        f"{p}: 10 of 30 rows (33%) were rejected, most often missing_action (10 rows); see "
        f"rejects.csv.")
    assert seen["many_rejected"].count == res.n_rejected == 10


# ===================================================================== end to end
@pytest.fixture(scope="module")
def short_course(tmp_path_factory):
    ev, oc = logs.one_second_course(n_learners=40, events_per_learner=120, weeks=2, seed=11)
    base = tmp_path_factory.mktemp("short")
    ev_path, oc_path = logs.write(base, ev, oc, name="events.csv.gz", compress=True)
    out = base / "out"
    rc = main(["analyze", str(ev_path), "--outcomes", str(oc_path), "--out", str(out),
               "--quiet", "--no-phases", "--no-validate", "--seed", "3", "--min-support", "0.05"])
    assert rc == 0
    return ev_path, out


def test_analyze_records_warnings_and_sessions(short_course):
    _, out = short_course
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert isinstance(s["warnings"], list)
    assert all(set(w) <= {"code", "message", "count"} for w in s["warnings"])
    assert s["sequences"] > s["learners"]
    assert s["method"]["unit"] == "learner"
    assert "sessions_not_independent" not in [w["code"] for w in s["warnings"]]
    assert s["clock"]["resolution"] == "second"
    det = json.loads((out / "detectors.json").read_text(encoding="utf-8"))
    assert det["encoding"]["unit"] == "session" and det["encoding"]["session_gap"] == 1800.0


def test_report_opens_with_the_data_checks_box(short_course):
    _, out = short_course
    html = (out / "report.html").read_text(encoding="utf-8")
    box = html.index('id="data-checks"')
    assert box < html.index("At a glance") if "At a glance" in html else True
    assert box < html.index('id="patterns"')
    assert "a new sequence starts after 1,800 s without an action" in html


def test_data_checks_box_escapes_messages(tmp_path):
    from seqmine.reporting.render import render_report
    (tmp_path / "summary.json").write_text(json.dumps({
        "groups": ["strong", "weak"],
        "warnings": [{"code": "tied_times", "message": "<script>alert(1)</script> & more",
                      "count": 3}]}), encoding="utf-8")
    html = render_report(tmp_path).read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; more" in html
    assert "<script>alert" not in html
    assert html.index('id="data-checks"') < html.index('id="overview"')


def test_watcher_follows_the_session_rule_of_the_detectors_file(short_course):
    # offline sessions and live sessions agree: the per-learner firing counts equal the
    # offline instance counts summed over the learner's sessions
    from seqmine.encoding.sequences import SequenceDB
    from seqmine.mining.miner import match
    ev_path, out = short_course
    det = json.loads((out / "detectors.json").read_text(encoding="utf-8"))
    table = pd.read_csv(out / "patterns.csv", keep_default_na=False)
    with_pause = table[table["pattern"].str.contains("pause:")]["pattern"].head(4).tolist()
    chosen = with_pause + table["pattern"].head(4).tolist()
    db = SequenceDB.load(out / "sequences")
    doc = dict(det, detectors=[{"id": f"T{k}", "tokens": p.split(" > "),
                                "direction": "discourage"} for k, p in enumerate(chosen)])
    m = doc["matching"]
    ps = match(db, chosen, max_gap=m["max_gap"], max_window=m["max_window"],
               skip_pauses=m["skip_pauses"])
    offline = pd.DataFrame(ps.counts.toarray(), columns=[f"T{k}" for k in range(len(chosen))])
    offline["learner"] = db.learners
    offline = offline.groupby("learner").sum()
    assert offline.to_numpy().sum() > 0
    w = Watcher(doc, idle_timeout=None, cooldown_seconds=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SeqmineWarning)
        res = load_events(ev_path)
    for r in res.events.sort_values(["time", "source_row"], kind="mergesort").itertuples():
        w.process({"learner": r.learner, "time": r.time, "action": r.action})
    live = w.flush()
    for learner, row in offline.iterrows():
        for d in offline.columns:
            assert live.get(learner, {}).get(d, 0) == row[d], (learner, d)


def test_session_gap_none_turns_the_rule_off(tmp_path, capsys):
    from seqmine.config import load_config
    ev, oc = logs.one_second_course(n_learners=6, events_per_learner=60, weeks=1, seed=12)
    ev_path, oc_path = logs.write(tmp_path, ev, oc)
    counts = {}
    for gap in ("1800", "none"):
        out = tmp_path / f"o{gap}"
        rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out", out,
                          "--session-gap", gap, "-q")
        assert rc == 0, err
        s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
        counts[gap] = s["sequences"]
        assert s["encoding"]["session_gap"] == (None if gap == "none" else 1800.0)
        assert isinstance(s["warnings"], list)
    assert counts["none"] == 6 < counts["1800"]
    rc, _, err = _cli(capsys, "encode", ev_path, "--outcomes", oc_path, "--out", tmp_path / "x",
                      "--session-gap", "soon")
    assert rc == 2 and ("--session-gap: expected a positive number of seconds (e.g. 1800) "
                        "or 'none'; got 'soon'") in err
    toml = tmp_path / "c.toml"
    toml.write_text('[encode]\nsession_gap = "none"\n', encoding="utf-8")
    assert load_config(toml)["encode"]["session_gap"] is None


@pytest.mark.slow
def test_planted_behaviours_recovered_with_sessions_learner_level():
    # the generator's ground truth (the direction each behaviour was planted with, not a
    # check value of ours): with a second session a week later for 30 % of learners, the
    # default encoding makes two sequences of them, and the learner-level tests still
    # find every planted behaviour in its direction, without treating sessions as
    # independent units (warnings are errors in this suite)
    from seqmine.mining.miner import match
    from seqmine.pipeline import contrast_unit
    from seqmine.scoring.contrast import contrast
    demo = generate_greenhouse(300, random_state=20261202, sessions=True)
    ev = demo.events.assign(time=(demo.events["time"] - logs.EPOCH).dt.total_seconds())
    oc = demo.outcomes.assign(gain=(demo.outcomes["post"] - demo.outcomes["pre"])
                              / (demo.outcomes["max"] - demo.outcomes["pre"]))
    from seqmine.inputs.outcomes import Grouping
    groups = Grouping().fit(oc).transform(oc)
    db = Encoder().fit(ev).transform(ev, groups=groups.dropna(), group_names=["strong", "weak"])
    assert db.n_sequences > ev["learner"].nunique()
    behaviours = demo.ground_truth["behaviours"]
    ps = match(db, [b["key_pattern"] for b in behaviours], max_gap=0)
    unit = contrast_unit("auto", db)
    assert unit == "learner"
    table = contrast(ps, db, unit=unit, n_bootstrap=0).set_index("pattern")
    for b in behaviours:
        row = table.loc[" > ".join(b["key_pattern"])]
        expected = "" if b["direction"] == "neutral" else b["direction"]
        assert row["favours"] == expected, (b["name"], row.to_dict())
