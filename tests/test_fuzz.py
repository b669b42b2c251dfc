"""Fuzzing: loaders, encoder, detectors reader and live watcher never fail unexpectedly.

Every target gets arbitrary or mutated input and must either return a result (with
its invariants) or raise one of seqmine's own errors (:class:`SeqmineError`); any
other exception, or a run past the deadline, fails the test.

The number of examples per test is ``SEQMINE_FUZZ_EXAMPLES`` (default 40, kept small
for CI); ``benchmarks/fuzz_long.py`` runs the same tests with thousands of examples
(see docs/reliability.md).
"""

import contextlib
import io
import json
import os
import string
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from seqmine.cli.main import main
from seqmine.detection.detectors import load_detectors, validate_detectors
from seqmine.detection.watcher import EventError, Watcher
from seqmine.encoding.encoder import Encoder
from seqmine.errors import SeqmineError
from seqmine.inputs.load import load_events
from seqmine.inputs.outcomes import load_outcomes

N_EXAMPLES = int(os.environ.get("SEQMINE_FUZZ_EXAMPLES", "40"))
FUZZ = settings(max_examples=N_EXAMPLES, deadline=timedelta(seconds=10),
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow, HealthCheck.data_too_large],
                derandomize=os.environ.get("SEQMINE_FUZZ_RANDOM") != "1")

ACTIONS = ["add_seedling", "set_light", "set_water", "advance_week", "measure_height",
           "open_chart", "paint_pot", "reset"]

# --------------------------------------------------------------- strategies
nasty_text = st.text(alphabet=st.characters(codec="utf-8"), max_size=30)
field = st.one_of(
    st.sampled_from(ACTIONS + ["", " ", "L1", "L2", "pause:long", '"', "a,b", "x\ty"]),
    st.integers(-10**12, 10**12).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.datetimes().map(lambda d: d.isoformat()),
    st.sampled_from(["2026-03-02T09:00:00Z", "2026-03-02T09:00:00+02:00", "1600-01-01",
                     "9999-12-31T23:59:59Z", "nan", "inf", "-1", "1e400", "12:00"]),
    nasty_text,
)
header = st.one_of(  # mostly the right columns (plus extras), sometimes anything
    st.lists(st.sampled_from(["session", "target", "channel", "extra"]), max_size=2).flatmap(
        lambda extra: st.permutations(["learner", "time", "action"] + extra)),
    st.lists(st.sampled_from(["learner", "time", "action", "session", "target", "channel",
                              "extra", "", "learner"]), min_size=1, max_size=6))
row_field = st.one_of(st.sampled_from(ACTIONS + ["L1", "L2", "L3"]),
                      st.integers(0, 10**6).map(str), field)

ROLE_VALUES = {"learner": st.sampled_from(["L1", "L2", "L3"]),
               "time": st.integers(0, 500).map(str),
               "action": st.sampled_from(ACTIONS)}


@st.composite
def delimited_text(draw):
    sep = draw(st.sampled_from([",", ";", "\t", "|"]))
    cols = draw(header)
    n = draw(st.integers(0, 12))
    rows = [sep.join(cols)]
    for _ in range(n):
        k = draw(st.integers(0, len(cols) + 1))  # short and long rows too
        if draw(st.integers(0, 3)):  # mostly the right width and plausible values
            rows.append(sep.join(draw(ROLE_VALUES.get(c, row_field) | row_field
                                      if draw(st.integers(0, 5)) == 0
                                      else ROLE_VALUES.get(c, row_field)) for c in cols))
        else:
            rows.append(sep.join(draw(st.lists(row_field, min_size=k, max_size=k))))
    end = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = end.join(rows) + draw(st.sampled_from(["", end]))
    return draw(st.sampled_from(["", "\ufeff"])) + text


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | nasty_text,
    lambda children: st.lists(children, max_size=4)
    | st.dictionaries(nasty_text | st.sampled_from(["learner", "time", "action"]), children,
                      max_size=4),
    max_leaves=12)


@st.composite
def event_object(draw):
    ev = {}
    for key, values in (("learner", st.sampled_from(["L1", "L2", "L3", " ", ""]) | nasty_text),
                        ("time", st.integers(0, 200) | st.floats() | field | json_values),
                        ("action", st.sampled_from(ACTIONS) | nasty_text | json_values)):
        if draw(st.integers(0, 9)):  # usually present
            ev[key] = draw(values)
    for key in ("session", "target", "channel"):
        if draw(st.booleans()):
            ev[key] = draw(json_values)
    return ev


def _check_load_result(res):
    assert res.n_input == len(res.events) + len(res.rejects)
    assert len(res.events) > 0
    assert np.isfinite(res.events["time"].to_numpy(float)).all()
    assert set(res.rejects["source_row"]).isdisjoint(set(res.events["source_row"]))


# ------------------------------------------------------------------ loaders
@FUZZ
@given(data=st.binary(max_size=400), ext=st.sampled_from(["csv", "tsv", "jsonl", "json"]))
def test_load_events_arbitrary_bytes(tmp_path_factory, data, ext):
    p = tmp_path_factory.mktemp("fz") / f"ev.{ext}"
    p.write_bytes(data)
    try:
        res = load_events(p)
    except SeqmineError as exc:
        event(f"error: {type(exc).__name__}")
        return
    event("loaded")
    _check_load_result(res)


@FUZZ
@given(text=delimited_text())
def test_load_events_csv_like_text(tmp_path_factory, text):
    p = tmp_path_factory.mktemp("fz") / "ev.csv"
    p.write_text(text, encoding="utf-8", newline="")
    try:
        res = load_events(p)
    except SeqmineError as exc:
        event(f"error: {type(exc).__name__}")
        return
    event("loaded")
    _check_load_result(res)


@st.composite
def xapi_statement(draw):
    """Statements shaped like xAPI, with any part missing or of the wrong kind."""
    name = st.sampled_from(["L1", "L2", "mailto:a@b.example", ""]) | nasty_text
    parts = {
        "actor": st.fixed_dictionaries({}, optional={
            "account": st.fixed_dictionaries({}, optional={"name": name}) | json_values,
            "mbox": name, "name": name}) | json_values,
        "verb": st.fixed_dictionaries({}, optional={
            "id": st.sampled_from(ACTIONS).map(lambda a: f"http://x.example/verbs/{a}") | name,
            "display": st.dictionaries(st.sampled_from(["en-US", "en", "und", "de"]), name,
                                       max_size=2) | json_values}) | json_values,
        "object": st.fixed_dictionaries({}, optional={
            "id": name, "definition": st.fixed_dictionaries({}, optional={
                "name": st.dictionaries(st.sampled_from(["en-US", "und"]), name, max_size=1)})}),
        "timestamp": st.integers(0, 500) | field,
        "context": st.fixed_dictionaries({}, optional={"registration": name}) | json_values,
    }
    good = {
        "actor": st.sampled_from(["L1", "L2", "L3"]).map(lambda n: {"account": {"name": n}}),
        "verb": st.sampled_from(ACTIONS).map(lambda a: {"id": f"http://x.example/verbs/{a}"}),
        "object": st.just({"id": "http://x.example/pot1"}),
        "timestamp": st.integers(0, 500).map(lambda t: iso_time(t)),
        "context": st.just({}),
    }
    return {k: draw(good[k] if draw(st.integers(0, 3)) else v) for k, v in parts.items()
            if draw(st.integers(0, 7))}


def iso_time(t):
    return f"2026-03-02T09:{t // 60:02d}:{t % 60:02d}Z"


@FUZZ
@given(statements=st.lists(xapi_statement(), max_size=8), wrapped=st.booleans())
def test_load_events_xapi_statements(tmp_path_factory, statements, wrapped):
    p = tmp_path_factory.mktemp("fz") / "ev.json"
    p.write_text(json.dumps({"statements": statements} if wrapped else statements),
                 encoding="utf-8")
    try:
        res = load_events(p)
    except SeqmineError as exc:
        event(f"error: {type(exc).__name__}")
        return
    event("loaded")
    _check_load_result(res)


@FUZZ
@given(lines=st.lists(st.one_of(event_object().map(json.dumps), json_values.map(json.dumps),
                                nasty_text), max_size=10),
       ext=st.sampled_from(["jsonl", "json"]))
def test_load_events_json_lines_and_statements(tmp_path_factory, lines, ext):
    p = tmp_path_factory.mktemp("fz") / f"ev.{ext}"
    p.write_text("\n".join(lines), encoding="utf-8")
    try:
        res = load_events(p)
    except SeqmineError as exc:
        event(f"error: {type(exc).__name__}")
        return
    event("loaded")
    _check_load_result(res)


OUTCOME_VALUES = {"learner": st.sampled_from([f"L{i}" for i in range(12)]),
                  "pre": st.integers(0, 10).map(str), "post": st.integers(0, 12).map(str),
                  "max": st.integers(0, 12).map(str), "score": st.integers(0, 100).map(str),
                  "label": st.sampled_from(["strong", "weak", "mid"])}


@st.composite
def outcome_rows(draw, cols):
    """Mostly plausible values per column, sometimes anything, sometimes ragged."""
    rows = []
    for k in range(draw(st.integers(0, 8))):
        if draw(st.integers(0, 4)):
            values = {**OUTCOME_VALUES, "learner": st.just(f"L{k}"),
                      "max": st.just("12"), "pre": st.integers(0, 12).map(str)}
            rows.append([draw(values.get(c, field) if draw(st.integers(0, 9))
                              else field) for c in cols])
        else:
            rows.append(draw(st.lists(field, max_size=6)))
    return rows


@FUZZ
@given(cols=st.one_of(st.sampled_from([["learner", "pre", "post", "max"], ["learner", "score"],
                                       ["learner", "label"], ["learner", "pre", "post"]]),
                      st.lists(st.sampled_from(["learner", "pre", "post", "max", "score",
                                                "label", "x"]), min_size=1, max_size=5)),
       data=st.data(), max_score=st.none() | st.floats(-5, 50))
def test_load_outcomes_arbitrary(tmp_path_factory, cols, data, max_score):
    rows = data.draw(outcome_rows(cols))
    p = tmp_path_factory.mktemp("fz") / "oc.csv"
    p.write_text("\n".join([",".join(cols)] + [",".join(r) for r in rows]) + "\n",
                 encoding="utf-8")
    try:
        out = load_outcomes(p, max_score=max_score)
    except SeqmineError as exc:
        event(f"error: {type(exc).__name__}")
        return
    event("loaded")
    assert out["learner"].is_unique and len(out) > 0
    for c in ("pre", "post", "max", "score"):
        if c in out:
            assert np.isfinite(out[c].to_numpy(float)).all() and (out[c] >= 0).all()


# ------------------------------------------------------------------ encoder
@st.composite
def event_table(draw):
    n = draw(st.integers(1, 30))
    learners = draw(st.lists(st.sampled_from(["a", "b", "c", "d"]), min_size=n, max_size=n))
    times = draw(st.lists(st.floats(0, 1e5) | st.integers(0, 50).map(float),
                          min_size=n, max_size=n))
    if draw(st.integers(0, 9)) == 0:  # now and then a missing or infinite time
        times[draw(st.integers(0, n - 1))] = draw(st.sampled_from([float("nan"), float("inf")]))
    actions = draw(st.lists(st.sampled_from(ACTIONS[:4]) | nasty_text.filter(bool),
                            min_size=n, max_size=n))
    sessions = draw(st.lists(st.sampled_from(["", "s1", "s2"]), min_size=n, max_size=n))
    targets = draw(st.lists(st.sampled_from(["", "pot1", "pot2"]), min_size=n, max_size=n))
    return pd.DataFrame({"learner": learners, "time": times, "action": actions,
                         "session": sessions, "target": targets})


encoder_params = st.fixed_dictionaries({  # mostly valid, sometimes not
    "template": st.sampled_from(["{action}", "{action}:{target}", "{action}{session}",
                                 "{action}", "{target}", "{action", "{action.x}", "{0}"]),
    "collapse_repeats": st.booleans(),
    "pause_strategy": st.sampled_from(["quantile", "quantile", "fixed", "learner_quantile",
                                       "none"]),
    "pause_bins": st.integers(1, 5) | st.integers(-1, 30),
    "pause_thresholds": st.sampled_from([[5.0], [5.0, 30.0], [1.0, 2.0, 3.0]])
    | st.none() | st.lists(st.floats(-1, 100), max_size=3),
    "implicit_pauses": st.sampled_from([(), ("short",), ("short",), ("medium",), ("nope",)]),
    "unit": st.sampled_from(["learner", "session"]),
    "session_gap": st.none() | st.floats(0.5, 100) | st.floats(-1, 100),
    "mapping": st.none() | st.dictionaries(st.sampled_from(ACTIONS[:4]),
                                           st.sampled_from(["", "x", "x", "pause:z"]),
                                           max_size=3),
})


@FUZZ
@given(events=event_table(), params=encoder_params)
def test_encoder_random_tables(events, params):
    try:
        db = Encoder(**params).fit_transform(events)
    except SeqmineError as exc:
        event(f"error: {str(exc)[:30]}")
        return
    event("encoded")
    # invariants: one action token per kept event, times sorted within a sequence,
    # every token id in the vocabulary
    n_action_tokens = int((~db.is_pause[db.tokens]).sum())
    if not params["collapse_repeats"] and not params["mapping"]:
        assert n_action_tokens == len(events)
    else:
        assert n_action_tokens <= len(events)
    assert db.tokens.max(initial=-1) < len(db.vocab)
    for i in range(db.n_sequences):
        t = db.times[db.offsets[i]:db.offsets[i + 1]]
        assert np.all(np.diff(t) >= 0)


# ------------------------------------------------------------ detectors file
VALID_DOC = {
    "format": "seqmine-detectors", "version": 1,
    "encoding": {"template": "{action}", "mapping": {"paint_pot": ""},
                 "collapse_repeats": False, "unit": "learner", "session_gap": None,
                 "pause": {"strategy": "quantile", "edges": [5.0, 30.0],
                           "labels": ["short", "medium", "long"], "implicit": ["short"]}},
    "vocabulary": ACTIONS,
    "matching": {"max_gap": 1, "max_window": 6, "skip_pauses": True},
    "detectors": [
        {"id": "D1", "tokens": ["set_light", "set_water"], "direction": "discourage",
         "hint": "One change at a time.", "priority": 1},
        {"id": "D2", "tokens": ["set_light", "advance_week", "measure_height"],
         "direction": "encourage", "priority": 2,
         "absence": {"after_events": 5, "after_seconds": 60.0}},
        {"id": "D3", "tokens": ["reset", "pause:long"], "direction": "discourage"},
    ],
}
EVENTS = [{"learner": "L1", "time": t, "action": a} for t, a in enumerate(
    ["set_light", "set_water", "advance_week", "measure_height", "reset", "paint_pot"], 1)]


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _paths(v, prefix + (i,))


ALL_PATHS = [p for p in _paths(VALID_DOC) if p]


@st.composite
def mutated_doc(draw):
    doc = json.loads(json.dumps(VALID_DOC))
    plausible = st.sampled_from([0, -1, 1, 2, 1.5, "", "x", "set_light", "pause:medium",
                                 "pause:short", "pause:long", [], {}, None, True, False,
                                 ["set_light"], [5.0], [1.0, 1.0]])
    for _ in range(draw(st.sampled_from([1, 1, 1, 2, 3]))):
        path = draw(st.sampled_from(ALL_PATHS))
        obj = doc
        try:
            for key in path[:-1]:
                obj = obj[key]
            last = path[-1]
            old = obj[last]
            choice = draw(st.integers(0, 4))
            if choice == 0 and isinstance(obj, dict):
                obj.pop(last, None)
            elif choice <= 2:  # a value of the same kind
                obj[last] = draw(_same_kind(old))
            else:
                obj[last] = draw(plausible | json_values)
        except (KeyError, IndexError, TypeError):
            pass  # an earlier mutation changed the shape; keep what we have
    return doc


def _same_kind(value):
    if isinstance(value, bool):
        return st.booleans()
    if isinstance(value, int):
        return st.integers(-2, 10)
    if isinstance(value, float):
        return st.floats(-1, 100, allow_nan=False)
    if isinstance(value, str):
        return st.sampled_from(ACTIONS + ["pause:long", "pause:medium", "{action}:{target}",
                                          "session", "quantile", "fixed", "none"]) | nasty_text
    if isinstance(value, list):
        return st.lists(st.sampled_from(ACTIONS + ["pause:long", "pause:medium"])
                        | st.floats(0, 60, allow_nan=False), max_size=4)
    return st.just(value)


def _exercise_watcher(doc):
    w = Watcher(doc)
    for ev in EVENTS:
        try:
            out = w.process(ev)
        except EventError:
            continue
        assert isinstance(out, list)
    w.flush()


@FUZZ
@given(doc=mutated_doc())
def test_detectors_mutations(doc):
    try:
        validate_detectors(doc, source="fuzz")
    except SeqmineError:
        event("rejected")
        return
    event("valid: watcher run")
    _exercise_watcher(doc)  # a document that validates must also run


@FUZZ
@given(doc=json_values | st.fixed_dictionaries(
    {"format": st.just("seqmine-detectors"), "version": st.just(1), "encoding": json_values,
     "matching": json_values, "detectors": json_values}))
def test_detectors_random_documents(tmp_path_factory, doc):
    p = tmp_path_factory.mktemp("fz") / "det.json"
    p.write_text(json.dumps(doc), encoding="utf-8")
    try:
        loaded = load_detectors(p)
    except SeqmineError:
        event("rejected")
        return
    event("valid: watcher run")
    _exercise_watcher(loaded)


@FUZZ
@given(data=st.binary(max_size=300))
def test_detectors_arbitrary_bytes(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("fz") / "det.json"
    p.write_bytes(data)
    with pytest.raises(SeqmineError):  # arbitrary bytes are never a valid detectors file
        load_detectors(p)


# ----------------------------------------------------------------- watcher
@FUZZ
@given(events=st.lists(event_object() | json_values, max_size=15))
def test_watcher_process_random_events(events):
    w = Watcher(VALID_DOC, idle_timeout=100.0)
    for ev in events:
        try:
            out = w.process(ev)
        except EventError:
            continue
        assert all(f.detector in {"D1", "D2", "D3"} for f in out)
    w.flush()
    assert w.stats["events"] == len(events)


@FUZZ
@given(lines=st.lists(st.one_of(event_object().map(json.dumps), nasty_text,
                                st.text(string.printable, max_size=40)), max_size=12))
def test_watch_command_random_lines(tmp_path_factory, lines):
    d = tmp_path_factory.mktemp("fz")
    det = d / "det.json"
    det.write_text(json.dumps(VALID_DOC), encoding="utf-8")
    ev = d / "ev.jsonl"
    ev.write_text("\n".join(lines) + "\n", encoding="utf-8", errors="surrogatepass")
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(["watch", str(det), str(ev)])
    assert rc == 0, err.getvalue()
    for ln in err.getvalue().splitlines():
        assert ln.startswith("seqmine watch: "), ln
    for ln in out.getvalue().splitlines():
        assert json.loads(ln)["type"] == "firing"
