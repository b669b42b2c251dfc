"""Live watcher behaviour: hints and cool-down, absence, sessions, bad events, the CLI."""

from __future__ import annotations

import io
import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.cli.main import main
from seqmine.detection.detectors import save_detectors
from seqmine.detection.watcher import EventError, Firing, Watcher, parse_event_time
from seqmine.errors import DataFileError, ParameterError


def _doc(dets=None, encoding=None, matching=None, **extra):
    doc = {"format": "seqmine-detectors", "version": 1,
           "encoding": encoding or {"template": "{action}"},
           "matching": matching or {"max_gap": None, "max_window": None, "skip_pauses": False},
           "detectors": dets or [
               {"id": "burst", "tokens": ["set_light", "set_water"], "direction": "discourage",
                "priority": 2, "evidence": {"effects": {"cohens_h": -0.4}}},
               {"id": "reset", "tokens": ["reset"], "direction": "discourage", "priority": 1},
               {"id": "measure", "tokens": ["advance_week", "measure_height"],
                "direction": "encourage", "absence": {"after_events": 4, "after_seconds": None}},
           ]}
    doc.update(extra)
    return doc


def _feed(w, events):
    out = []
    for e in events:
        out.extend(w.process(e))
    return out


def ev(learner, t, action, **kw):
    return dict(learner=learner, time=t, action=action, **kw)


# ------------------------------------------------------------- hints, ranking
def test_ranking_and_cooldown_keep_counting_separate_from_hints():
    w = Watcher(_doc(), cooldown_seconds=60)
    out = _feed(w, [ev("a", 0, "set_light"), ev("a", 1, "set_water"), ev("a", 2, "reset")])
    assert [(f.detector, f.suppressed, f.reason) for f in out] == [
        ("burst", False, None), ("reset", True, "cooldown")]
    # same event completes both: priority 1 wins, the other is outranked
    w = Watcher(_doc(dets=[
        {"id": "low", "tokens": ["set_light", "reset"], "direction": "discourage", "priority": 3},
        {"id": "high", "tokens": ["reset"], "direction": "discourage", "priority": 1}]))
    out = _feed(w, [ev("a", 0, "set_light"), ev("a", 1, "reset")])
    assert {f.detector: (f.suppressed, f.reason) for f in out} == {
        "high": (False, None), "low": (True, "outranked")}
    # after the cool-down the next firing is delivered again; occurrences keep counting
    out = _feed(w, [ev("a", 30, "reset"), ev("a", 100, "reset")])
    assert [(f.detector, f.occurrence, f.suppressed) for f in out] == [
        ("high", 2, True), ("high", 3, False)]
    assert w.stats["firings"] == 4 and w.stats["hints"] == 2


def test_equal_priority_ranks_by_effect_then_hint_recency():
    dets = [{"id": "small", "tokens": ["x"], "direction": "discourage",
             "evidence": {"effects": {"cohens_h": 0.2}}},
            {"id": "big", "tokens": ["x"], "direction": "discourage",
             "evidence": {"effects": {"cohens_h": -0.7}}}]
    w = Watcher(_doc(dets=dets), cooldown_seconds=10)
    first = [f for f in w.process(ev("a", 0, "x")) if not f.suppressed]
    second = [f for f in w.process(ev("a", 20, "x")) if not f.suppressed]
    assert first[0].detector == "big"
    assert second[0].detector == "big"  # effect outranks recency
    dets[0]["evidence"]["effects"]["cohens_h"] = 0.7
    w = Watcher(_doc(dets=dets), cooldown_seconds=10)
    firsts = [f.detector for t in (0, 20, 40) for f in w.process(ev("a", t, "x")) if not f.suppressed]
    assert firsts == ["small", "big", "small"]  # tie: the one hinted least recently


def test_encourage_occurrences_are_counted_not_hinted_unless_asked():
    w = Watcher(_doc())
    out = _feed(w, [ev("a", 0, "advance_week"), ev("a", 1, "measure_height")])
    assert [(f.detector, f.kind, f.suppressed, f.reason) for f in out] == [
        ("measure", "occurrence", True, "no_hint")]
    w = Watcher(_doc(), hint_on_encourage=True)
    out = _feed(w, [ev("a", 0, "advance_week"), ev("a", 1, "measure_height")])
    assert not out[0].suppressed


def test_absence_after_events_and_seconds():
    w = Watcher(_doc(), cooldown_seconds=0)
    out = _feed(w, [ev("a", t, "open_chart") for t in range(6)])
    assert [(f.detector, f.kind, f.time, f.event_times) for f in out] == [
        ("measure", "absence", 3.0, ())]  # the 4th event, fired once
    # shown before the threshold -> no absence firing
    out = _feed(Watcher(_doc()), [ev("b", 0, "advance_week"), ev("b", 1, "measure_height")]
                + [ev("b", t, "open_chart") for t in range(2, 8)])
    assert [f.kind for f in out] == ["occurrence"]
    doc = _doc()
    doc["detectors"][2]["absence"] = {"after_events": None, "after_seconds": 300}
    w = Watcher(doc)
    assert _feed(w, [ev("c", 0, "open_chart"), ev("c", 200, "open_chart")]) == []
    out = w.tick(400.0)
    assert [(f.learner, f.kind, f.time) for f in out] == [("c", "absence", 400.0)]
    assert w.tick(500.0) == []


def test_an_absence_hint_held_back_is_tried_again_after_the_cooldown():
    # a discourage hint at t=2 starts the cool-down; the encourage absence point (4th
    # event, t=3) falls inside it, so that hint is suppressed and tried again at the
    # first event after the cool-down -- unless the pattern has occurred meanwhile
    w = Watcher(_doc(), cooldown_seconds=10)
    out = _feed(w, [ev("a", 0, "open_chart"), ev("a", 1, "set_light"), ev("a", 2, "set_water"),
                    ev("a", 3, "open_chart"), ev("a", 8, "open_chart"),
                    ev("a", 13, "open_chart"), ev("a", 30, "open_chart")])
    assert [(f.detector, f.kind, f.time, f.suppressed, f.reason) for f in out] == [
        ("burst", "occurrence", 2.0, False, None),
        ("measure", "absence", 3.0, True, "cooldown"),
        ("measure", "absence", 13.0, False, None)]
    w = Watcher(_doc(), cooldown_seconds=10)
    out = _feed(w, [ev("b", 0, "open_chart"), ev("b", 1, "set_light"), ev("b", 2, "set_water"),
                    ev("b", 3, "open_chart"), ev("b", 5, "advance_week"),
                    ev("b", 6, "measure_height"), ev("b", 20, "open_chart")])
    assert [(f.detector, f.kind, f.suppressed) for f in out] == [
        ("burst", "occurrence", False), ("measure", "absence", True),
        ("measure", "occurrence", True)]


def test_absence_hints_per_sequence_are_limited():
    dets = [{"id": f"e{k}", "tokens": [f"x{k}", "y"], "direction": "encourage",
             "absence": {"after_events": 2 + k, "after_seconds": None}} for k in range(3)]
    w = Watcher(_doc(dets=dets), cooldown_seconds=0, max_absence_hints=2)
    out = _feed(w, [ev("a", t, "open_chart") for t in range(6)])
    assert [(f.detector, f.suppressed, f.reason) for f in out] == [
        ("e0", False, None), ("e1", False, None), ("e2", True, "limit")]
    w = Watcher(_doc(dets=dets), cooldown_seconds=0, max_absence_hints=None)
    assert not any(f.suppressed for f in _feed(w, [ev("a", t, "open_chart") for t in range(6)]))
    with pytest.raises(ParameterError, match="'max_absence_hints' parameter of Watcher"):
        Watcher(_doc(dets=dets), max_absence_hints=-1)


# ------------------------------------------------------------- encoder state
def test_sessions_split_sequences_and_reset_matching():
    enc = {"template": "{action}", "unit": "session", "session_gap": 100.0,
           "pause": {"strategy": "fixed", "edges": [10.0], "labels": ["short", "long"],
                     "implicit": ["short"]}}
    dets = [{"id": "sw", "tokens": ["set_light", "set_water"], "direction": "discourage"},
            {"id": "lp", "tokens": ["pause:long"], "direction": "discourage"}]
    w = Watcher(_doc(dets=dets, encoding=enc), cooldown_seconds=0)
    out = _feed(w, [ev("a", 0, "set_light"), ev("a", 500, "set_water"),  # gap > 100: new session
                    ev("a", 520, "set_light", session="x"), ev("a", 530, "set_water", session="x")])
    # no pause across a session boundary; new session via the session column too
    assert [(f.detector, f.sequence) for f in out] == [("lp", "x"), ("sw", "x")]
    assert w._learners["a"].seq == 3


def test_mapping_drop_and_template_and_collapse():
    enc = {"template": "{action}:{target}", "mapping": {"open_guide": "", "set_water": "set_light"},
           "collapse_repeats": True}
    dets = [{"id": "two", "tokens": ["set_light:pot1", "advance_week:"], "direction": "discourage",
             }]
    w = Watcher(_doc(dets=dets, encoding=enc, matching={"max_gap": 0, "max_window": None,
                                                          "skip_pauses": False}))
    out = _feed(w, [ev("a", 0, "set_light", target="pot1"), ev("a", 1, "open_guide"),
                    ev("a", 2, "set_water", target="pot1"), ev("a", 3, "advance_week")])
    assert [(f.detector, f.event_times) for f in out] == [("two", (0.0, 3.0))]
    assert w.stats["dropped"] == 1 and w.stats["collapsed"] == 1


def test_unknown_symbols_are_noted_once_and_take_a_position():
    doc = _doc(vocabulary=["set_light", "set_water"],
               matching={"max_gap": 0, "max_window": None, "skip_pauses": False})
    w = Watcher(doc)
    out = _feed(w, [ev("a", 0, "set_light"), ev("a", 1, "juggle"), ev("a", 2, "set_water"),
                    ev("b", 0, "juggle")])
    assert out == []  # the unknown action sits between the two
    assert len(w.notes) == 1 and "'juggle' was not seen in the analysed data" in w.notes[0]


def test_learner_quantile_pauses_are_noted():
    enc = {"template": "{action}", "pause": {"strategy": "learner_quantile", "edges": [3.0],
                                             "labels": ["short", "long"], "implicit": []}}
    w = Watcher(_doc(dets=[{"id": "p", "tokens": ["pause:long"], "direction": "discourage"}],
                     encoding=enc))
    assert len(w.notes) == 1 and "each learner's own quantiles" in w.notes[0]


def test_idle_learners_expire():
    w = Watcher(_doc(), idle_timeout=100)
    _feed(w, [ev("a", 0, "set_light"), ev("b", 50, "open_chart"), ev("b", 300, "open_chart")])
    assert w.n_learners == 1 and w.stats["expired_learners"] == 1
    w = Watcher(_doc(), idle_timeout=None)
    _feed(w, [ev("a", 0, "set_light"), ev("b", 10 ** 6, "reset"), ev("b", 10 ** 6 + 1, "reset")])
    assert w.n_learners == 2
    assert w.flush() == {"a": {}, "b": {"reset": 2}}
    assert w.n_learners == 0


# ------------------------------------------------------------------ bad input
@pytest.mark.parametrize("event, message", [
    ([1, 2], "not a JSON object"),
    ("text", "not a JSON object"),
    ({"time": 1, "action": "x"}, "missing field 'learner'"),
    ({"learner": "a", "action": "x"}, "missing field 'time'"),
    ({"learner": "a", "time": 1}, "missing field 'action'"),
    ({"learner": " ", "time": 1, "action": "x"}, "field 'learner' is empty"),
    ({"learner": None, "time": 1, "action": "x"}, "field 'learner' must be a string, got NoneType"),
    ({"learner": "a", "time": 1, "action": ["x"]}, "field 'action' must be a string, got list"),
    ({"learner": "a", "time": 1, "action": "x\x01"}, "contains control characters"),
    ({"learner": "a", "time": 1, "action": "x" * 201}, "201 characters long"),
    ({"learner": "a", "time": "soon", "action": "x"}, "time 'soon' is neither ISO 8601 nor numeric"),
    ({"learner": "a", "time": "", "action": "x"}, "the time is empty"),
    ({"learner": "a", "time": None, "action": "x"}, "time None is neither"),
    ({"learner": "a", "time": float("nan"), "action": "x"}, "not a finite number"),
    ({"learner": "a", "time": "1e400", "action": "x"}, "not a finite number"),
    ({"learner": "a", "time": "2150-01-01T00:00:00", "action": "x"}, "after 2100"),
])
def test_bad_events_raise_one_line_errors_and_leave_state_alone(event, message):
    w = Watcher(_doc())
    with pytest.raises(EventError, match=message):
        w.process(event)
    assert w.n_learners == 0 and w.stats["rejected"] == 1


def test_out_of_order_duplicates_and_mixed_times():
    w = Watcher(_doc(), out_of_order_tolerance=2)
    w.process(ev("a", 10, "set_light"))
    with pytest.raises(EventError, match=r"learner 'a': time 5 is 5 s before .*\(tolerance 2 s\); events are not reordered"):
        w.process(ev("a", 5, "set_water"))
    # within the tolerance: processed in arrival order
    assert [f.detector for f in w.process(ev("a", 9, "set_water"))] == ["burst"]
    with pytest.raises(EventError, match="duplicate of an earlier event at time 10"):
        w.process(ev("a", 10, "set_light"))
    w.process(ev("a", 10, "set_light", target="other"))  # differs in target: kept
    with pytest.raises(EventError, match="is iso but the stream's times are numeric"):
        w.process(ev("a", "2026-01-01T00:00:00Z", "reset"))
    assert w.stats["out_of_order"] == 1 and w.stats["duplicates"] == 1
    w = Watcher(_doc(), reject_duplicates=False)
    w.process(ev("a", 10, "reset"))
    assert len(w.process(ev("a", 10, "reset"))) == 1


def test_parse_event_time_matches_the_loader():
    from seqmine.inputs.load import parse_times

    values = ["2026-03-01T10:00:00Z", "2026-03-01T11:00:00+01:00", "2026-03-01 10:00:05",
              "2026-03-01T10:00:05.250", "12.5", " 7 "]
    ours = [parse_event_time(v)[0] for v in values]
    iso, _r, _k = parse_times(values[:4])
    num, _r, _k = parse_times(values[4:])
    assert ours == pytest.approx(list(iso) + list(num))


def test_watcher_parameter_and_file_errors(tmp_path):
    with pytest.raises(ParameterError, match="'cooldown_seconds' parameter of Watcher"):
        Watcher(_doc(), cooldown_seconds=-1)
    with pytest.raises(ParameterError, match="'idle_timeout' parameter of Watcher"):
        Watcher(_doc(), idle_timeout=0)
    with pytest.raises(DataFileError, match="detectors file not found"):
        Watcher(tmp_path / "nope.json")
    with pytest.raises(DataFileError, match=r"detectors\[0\].direction"):
        Watcher(_doc(dets=[{"id": "x", "tokens": ["a"], "direction": "up"}]))


def test_firing_record_and_iso_output():
    w = Watcher(_doc())
    w.process(ev("a", "2026-03-01T10:00:00Z", "set_light"))
    f = w.process(ev("a", "2026-03-01T10:00:07Z", "set_water"))[0]
    assert isinstance(f, Firing)
    rec = f.to_dict(iso_times=w.time_kind == "iso")
    assert rec["time"] == "2026-03-01T10:00:07Z"
    assert rec["event_times"] == ["2026-03-01T10:00:00Z", "2026-03-01T10:00:07Z"]
    assert set(rec) == {"type", "learner", "detector", "kind", "direction", "time", "event_times",
                        "sequence", "occurrence", "priority", "suppressed", "reason", "hint"}


def test_disabled_detectors_do_not_fire():
    doc = _doc()
    doc["detectors"][1]["enabled"] = False
    assert _feed(Watcher(doc), [ev("a", 0, "reset")]) == []


# ------------------------------------------------------------------------ CLI
def _write_doc(tmp_path, doc=None):
    return str(save_detectors(doc or _doc(), tmp_path / "detectors.json"))


def test_cli_watch_reads_file_and_reports_bad_lines(tmp_path, capsys):
    det = _write_doc(tmp_path)
    lines = [json.dumps(ev("a", 0, "set_light")), "{not json", "", json.dumps({"learner": "a"}),
             json.dumps(ev("a", 1, "set_water")), json.dumps(ev("a", -10, "reset")),
             json.dumps(ev("a", 2, "reset")), "[1, 2]"]
    events = tmp_path / "events.jsonl"
    events.write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert main(["watch", det, str(events), "--summary"]) == 0
    cap = capsys.readouterr()
    out = [json.loads(x) for x in cap.out.splitlines()]
    assert [(r["detector"], r["suppressed"]) for r in out] == [("burst", False), ("reset", True)]
    err = cap.err.splitlines()
    assert err[0].startswith(f"seqmine watch: {events}:2: malformed JSON (")
    assert err[0].endswith("event skipped")
    assert err[1] == f"seqmine watch: {events}:4: missing field 'time', 'action'; every event needs learner, time and action; event skipped"
    assert err[2].startswith(f"seqmine watch: {events}:6: learner 'a': time -10 is 11 s before")
    assert err[3] == f"seqmine watch: {events}:8: the event is not a JSON object with learner, time and action; event skipped"
    assert "events=7" in err[4] and "rejected=4" in err[4]
    assert main(["watch", det, str(events), "--hints-only", "-q"]) == 0
    assert [json.loads(x)["detector"] for x in capsys.readouterr().out.splitlines()] == ["burst"]


def test_cli_watch_writes_times_in_the_streams_unit(tmp_path, capsys):
    # A millisecond clock (as the analysis recorded it) gives firing times in
    # milliseconds, the unit the events came in, not seconds.
    det = _write_doc(tmp_path, _doc(encoding={"template": "{action}",
                                              "time": {"unit": "ms"}}))
    events = tmp_path / "events.jsonl"
    events.write_text("\n".join(json.dumps(e) for e in [
        ev("a", 1767261600000, "set_light"), ev("a", 1767261601500, "set_water")]) + "\n",
        encoding="utf-8")
    assert main(["watch", det, str(events), "-q"]) == 0
    out = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert [(r["detector"], r["time"], r["event_times"]) for r in out] == [
        ("burst", 1767261601500, [1767261600000, 1767261601500])]
    assert main(["watch", det, str(events), "-q", "--times", "iso"]) == 0
    out = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert out[0]["time"] == "2026-01-01T10:00:01.500000Z"


def test_cli_watch_reads_stdin(tmp_path, capsys, monkeypatch):
    det = _write_doc(tmp_path)
    text = "\n".join(json.dumps(e) for e in [ev("a", 0, "reset"), ev("b", 0, "reset")]) + "\n"
    monkeypatch.setattr("sys.stdin", io.StringIO(text))
    assert main(["watch", det, "--cooldown", "0"]) == 0
    assert [json.loads(x)["learner"] for x in capsys.readouterr().out.splitlines()] == ["a", "b"]


def test_cli_watch_exit_2_only_for_unusable_detectors(tmp_path, capsys):
    events = tmp_path / "e.jsonl"
    events.write_text(json.dumps(ev("a", 0, "reset")) + "\n", encoding="utf-8")
    newer = _doc()
    newer["version"] = 7
    p = tmp_path / "newer.json"
    p.write_text(json.dumps(newer), encoding="utf-8")
    assert main(["watch", str(p), str(events)]) == 2
    assert "version 7 is newer than this seqmine reads" in capsys.readouterr().err
    p.write_text("{", encoding="utf-8")
    assert main(["watch", str(p), str(events)]) == 2
    assert "not valid JSON" in capsys.readouterr().err
    det = _write_doc(tmp_path)
    assert main(["watch", det, str(tmp_path / "missing.jsonl")]) == 2
    assert "events file not found" in capsys.readouterr().err
    assert main(["watch", det, str(events), "--idle-timeout", "soon"]) == 2
    assert "--idle-timeout takes seconds or 'none'" in capsys.readouterr().err


def test_cli_watch_pseudonymizes_learners(tmp_path, capsys):
    from seqmine.inputs.privacy import pseudonymize

    det = _write_doc(tmp_path)
    key = tmp_path / "key.txt"
    key.write_text("0123456789abcdef0123", encoding="utf-8")
    events = tmp_path / "e.jsonl"
    events.write_text("\n".join(json.dumps(e) for e in [
        ev(" ana ", 0, "reset"), ev("ana", 5, "set_light"), ev("ana", 3, "reset")]) + "\n",
        encoding="utf-8")
    assert main(["watch", det, str(events), "--pseudonymize", str(key), "--tolerance", "0"]) == 0
    cap = capsys.readouterr()
    expected = pseudonymize(["ana"], b"0123456789abcdef0123")[0]
    assert [json.loads(x)["learner"] for x in cap.out.splitlines()] == [expected]
    assert "ana" not in cap.out and "ana" not in cap.err and expected in cap.err


_values = st.one_of(st.none(), st.booleans(), st.integers(-10 ** 12, 10 ** 12),
                    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=30),
                    st.sampled_from(["2026-03-01T10:00:00Z", "12.5", "set_light", "reset", " "]),
                    st.lists(st.integers(), max_size=2), st.dictionaries(st.text(max_size=3),
                                                                         st.integers(), max_size=2))


_plausible = st.fixed_dictionaries(
    {"learner": st.sampled_from(["a", "b", 7]), "time": st.one_of(
        st.integers(0, 60), st.floats(0, 60), st.sampled_from(["2026-03-01T10:00:00Z", "30"])),
     "action": st.sampled_from(["reset", "set_light", "paint_pot"])},
    optional={"session": st.sampled_from(["s1", "s2", None, 3]),
              "target": st.sampled_from(["", "p1", None])})


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(_values, _plausible, _plausible, st.fixed_dictionaries(
    {}, optional={"learner": _values, "time": _values, "action": _values, "session": _values,
                  "target": _values, "channel": _values})), max_size=25))
def test_watcher_never_fails_on_arbitrary_events(events):
    enc = {"template": "{action}:{target}", "unit": "session", "session_gap": 30.0,
           "collapse_repeats": True,
           "pause": {"strategy": "fixed", "edges": [2.0], "labels": ["short", "long"],
                     "implicit": []}}
    dets = [{"id": "a", "tokens": ["reset:", "pause:long"], "direction": "discourage"},
            {"id": "b", "tokens": ["set_light:"], "direction": "encourage",
             "absence": {"after_events": 2, "after_seconds": 5.0}}]
    w = Watcher(_doc(dets=dets, encoding=enc), idle_timeout=10.0, cooldown_seconds=1)
    for e in events:
        try:
            out = w.process(e)
        except EventError as exc:
            assert "\n" not in str(exc)
            continue
        assert all(isinstance(f, Firing) for f in out)
        for f in out:
            json.dumps(f.to_dict(iso_times=w.time_kind == "iso"), allow_nan=False)
    w.tick(100.0)
    w.flush()
