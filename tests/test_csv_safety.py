"""Spreadsheet formula injection and exact pattern tokens.

Every CSV seqmine writes goes through ``_util/csvio.write_csv``, which writes a text cell
that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return (and is not a
number) with a leading apostrophe, as the OWASP "CSV Injection" page advises; the
readers remove it again. A full run on logs whose actions, group labels and learner ids
start with those characters is scanned cell by cell, and property tests check that any
text and any hostile action name (``" > "``, quotes, control characters, leading ``=``)
round-trips through patterns.csv into detectors and the watcher.
"""

import csv
import json
import re

import pandas as pd
import pytest
from _run_helpers import FAST_TOML, digest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from seqmine.cli.main import main

from seqmine._util.csvio import FORMULA_TRIGGERS, neutralise, read_csv, restore, write_csv
from seqmine.demo_data import write_greenhouse
from seqmine.detection.detectors import export_detectors
from seqmine.detection.watcher import Watcher
from seqmine.encoding.sequences import SequenceDB
from seqmine.mining.miner import mine
from seqmine.mining.patterns import pattern_id
from seqmine.scoring.contrast import contrast

NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?|[+-]?(inf|nan)", re.IGNORECASE)
HOSTILE_ACTIONS = {"paint_pot": "=cmd|' /C calc'!A0", "reset": "+SUM(1;2)",
                   "open_guide": "-2+3+cmd", "open_chart": "@SUM(A1:A9)"}
HOSTILE_LABELS = {"strong": "=HYPERLINK(\"http://x\")", "weak": "-weak"}


def _risky(cell):
    return cell[:1] != "" and cell[:1] in FORMULA_TRIGGERS and not NUMBER.fullmatch(cell)


def _cells(path):
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.reader(fh):
            yield from row


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("formula")
    d = root / "data"
    write_greenhouse(d, n_learners=40, random_state=4, events_per_learner=(20, 35))
    ev = pd.read_csv(d / "events.csv", dtype=str, keep_default_na=False)
    ids = {old: f"{'=+-@'[k % 4]}id{k}" for k, old in enumerate(sorted(ev["learner"].unique()))}
    ev["action"] = ev["action"].replace(HOSTILE_ACTIONS)
    ev["learner"] = ev["learner"].map(ids)
    ev.to_csv(d / "events.csv", index=False)
    oc = pd.read_csv(d / "outcomes.csv")
    gain = (oc["post"] - oc["pre"]) / (oc["max"] - oc["pre"])
    labels = (gain > gain.median()).map({True: HOSTILE_LABELS["strong"],
                                         False: HOSTILE_LABELS["weak"]})
    pd.DataFrame({"learner": oc["learner"].map(ids), "label": labels}).to_csv(
        d / "labels.csv", index=False)
    (d / "fast.toml").write_text(FAST_TOML)
    out = root / "out"
    assert main(["analyze", str(d / "events.csv"), "--outcomes", str(d / "labels.csv"),
                 "--out", str(out), "--config", str(d / "fast.toml"), "-q"]) == 0
    val = root / "validation"
    assert main(["validate", str(d / "events.csv"), "--outcomes", str(d / "labels.csv"),
                 "--out", str(val), "--splits", "2", "--fractions", "0.5,1", "--bootstrap",
                 "5", "--classifiers", "pattern,majority", "-q"]) == 0
    return out, val


def test_no_csv_cell_can_run_as_a_formula(hostile_run):
    folders = hostile_run
    checked = 0
    for folder in folders:
        for rel in digest(folder):
            if not rel.endswith(".csv"):
                continue
            for cell in _cells(folder / rel):
                checked += 1
                assert not _risky(cell), (rel, cell)
    assert checked > 1000
    # the hostile values were really written (neutralised), so the scan saw them
    raw = (folders[0] / "patterns.csv").read_text(encoding="utf-8")
    assert "'=cmd|' /C calc'!A0" in raw and "'@SUM(A1:A9)" in raw
    assert "support_=HYPERLINK" in raw  # column names start with support_, so unchanged
    paths = (folders[0] / "phases" / "state_paths.csv").read_text(encoding="utf-8")
    assert "'=id" in paths and "'+id" in paths and "'@id" in paths


def test_the_readers_undo_the_apostrophe(hostile_run):
    out, _ = hostile_run
    table = read_csv(out / "patterns.csv", keep_default_na=False)
    tokens = {t for cell in table["tokens"] for t in json.loads(cell)}
    assert set(HOSTILE_ACTIONS.values()) & tokens
    for row in table.to_dict("records"):
        assert row["pattern"] == " > ".join(json.loads(row["tokens"]))
        assert row["pattern_id"] == pattern_id(json.loads(row["tokens"]))
    page = (out / "report.html").read_text(encoding="utf-8")
    assert '<span class="tok">=cmd|&#x27; /C calc&#x27;!A0</span>' in page  # shown as logged
    assert '<span class="tok">&#x27;' not in page  # no apostrophe from the CSV escaping


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet=st.sampled_from(list("'=+-@\t\r\n ,\"ab1.e") + ["\x00", "\x9b"]),
               max_size=8))
def test_neutralise_round_trips_and_is_inert(text):
    safe = neutralise(text)
    assert restore(safe) == text
    assert not _risky(safe)
    assert safe == text or safe == "'" + text


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.lists(st.sampled_from(list("=+-@'\"\t\r\n,ab ") + [" > "]), min_size=1,
                         max_size=6).map("".join), min_size=3, max_size=3))
def test_write_csv_round_trips_any_text(tmp_path, cells):
    frame = pd.DataFrame({"x": cells, "=y": [1.5, -2.0, 3.0]})
    path = write_csv(frame, tmp_path / "t.csv")
    back = read_csv(path, dtype={"x": str}, keep_default_na=False)
    assert back.columns.tolist() == ["x", "=y"]
    assert back["x"].tolist() == cells and back["=y"].tolist() == [1.5, -2.0, 3.0]


_NAME = st.lists(st.sampled_from(["a", "b", " > ", ">", "\"", "'", ",", "=", "+", "-", "@", "\t",
                                  "\x1b", "\x85", "é"]),
                 min_size=1, max_size=5).map("".join).filter(lambda s: s.strip() == s and s)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(names=st.lists(_NAME, min_size=3, max_size=3, unique=True))
def test_hostile_action_names_round_trip_into_detectors_and_the_watcher(tmp_path, names):
    a, b, c = names
    # strong learners always show a then b; weak learners show b then a
    strong = [[a, b, c, a, b]] * 6
    weak = [[b, a, c, c, b]] * 6
    db = SequenceDB.from_lists(strong + weak, groups=["strong"] * 6 + ["weak"] * 6,
                               group_names=["strong", "weak"])
    table = contrast(mine(db, min_support=0.5, max_length=2, max_gap=0), db,
                     n_bootstrap=0, redundancy=None)
    path = write_csv(table, tmp_path / "patterns.csv")
    back = read_csv(path, keep_default_na=False)
    assert [json.loads(t) for t in back["tokens"]] == [json.loads(t) for t in table["tokens"]]
    assert back["pattern_id"].tolist() == table["pattern_id"].tolist()
    assert len(set(back["pattern_id"])) == len(back)  # one id per token list
    back["q_value"] = pd.to_numeric(back["q_value"])
    doc = export_detectors(back, db, {"max_gap": 0}, min_stability=0, max_detectors=50,
                           drop_redundant=False)
    by_id = {d["pattern_id"]: d["tokens"] for d in doc["detectors"]}
    ab = pattern_id([a, b])
    assert by_id.get(ab) == [a, b]  # the exact tokens, whatever the names hold
    if any(ch in name for name in (a, b, c) for ch in "\t\x1b\x85"):
        return  # control characters: the live stream rejects such actions, as the loader does
    watcher = Watcher(doc, cooldown_seconds=0)
    fired = []
    for t, action in enumerate(strong[0]):
        fired += watcher.process({"learner": "s", "time": t, "action": action})
    det = next(d["id"] for d in doc["detectors"] if d["pattern_id"] == ab)
    assert sum(f.detector == det for f in fired) == 2  # a > b occurs twice, disjointly
