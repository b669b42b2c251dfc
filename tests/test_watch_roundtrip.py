"""Round trip on the demo data: mine -> contrast -> export -> watch == offline counts."""

from __future__ import annotations

import csv
import json
from collections import Counter
from pathlib import Path

import pytest

from seqmine.cli.main import main
from seqmine.detection.detectors import (
    build_detectors,
    load_detectors,
    save_detectors,
    select_detectors,
)
from seqmine.detection.watcher import EventError, Watcher
from seqmine.encoding.encoder import Encoder
from seqmine.inputs.load import load_events
from seqmine.inputs.outcomes import load_outcomes
from seqmine.pipeline import prepare_sequences

DEMO = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"

pytestmark = pytest.mark.skipif(not (DEMO / "events.csv").is_file(),
                                reason="demo data set not present")




def _offline_counts(db, doc):
    from seqmine.mining.miner import match

    index = {v: i for i, v in enumerate(db.vocab)}
    dets = doc["detectors"]
    m = doc["matching"]
    ps = match(db, [tuple(index[t] for t in d["tokens"]) for d in dets], max_gap=m["max_gap"],
               max_window=m["max_window"], skip_pauses=m["skip_pauses"])
    out = Counter()
    coo = ps.counts.tocoo()
    for i, j, v in zip(coo.row, coo.col, coo.data):
        out[(str(db.learners[i]), dets[j]["id"])] += int(v)
    return out


def _replay(path, events_csv):
    w = Watcher(path, idle_timeout=None, cooldown_seconds=120)
    counts = Counter()
    rejected = 0
    with open(events_csv, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            try:
                firings = w.process(row)
            except EventError:
                rejected += 1
                continue
            for f in firings:
                if f.kind == "occurrence":
                    counts[(f.learner, f.detector)] += 1
    return counts, rejected, w


@pytest.mark.slow
def test_demo_round_trip_counts_equal_offline(tmp_path):
    from seqmine.mining.miner import mine
    from seqmine.scoring.contrast import contrast

    loaded = load_events(DEMO / "events.csv")
    outcomes = load_outcomes(DEMO / "outcomes.csv")
    prepared = prepare_sequences(loaded, outcomes, encoder=Encoder(implicit_pauses=("short",)))
    db = prepared.db
    ps = mine(db, min_support=0.15, max_length=4, max_gap=1, skip_pauses=True)
    table = contrast(ps, db, n_bootstrap=20, random_state=0)
    rows = select_detectors(table, min_stability=0.5, max_detectors=30)
    assert len(rows) >= 3, "the demo data should yield a few significant, stable patterns"
    doc = build_detectors(rows, db.encoding, ps.constraints, group_names=db.group_names,
                          group_sizes=db.group_sizes().tolist(),
                          vocabulary=[v for v, p in zip(db.vocab, db.is_pause) if not p],
                          absence_after_events=30)
    path = save_detectors(doc, tmp_path / "detectors.json")
    doc = load_detectors(path)
    assert {d["direction"] for d in doc["detectors"]} == {"discourage", "encourage"}

    live, rejected, w = _replay(path, DEMO / "events.csv")
    offline = _offline_counts(db, doc)
    assert rejected == len(loaded.rejects)
    assert sum(offline.values()) > 100
    # learners without an outcome are not in the encoded database; compare the rest
    known = set(db.learners.tolist())
    assert {k: v for k, v in live.items() if k[0] in known} == offline
    assert w.stats["hints"] < w.stats["firings"]  # the cool-down holds hints back


@pytest.mark.slow
def test_demo_round_trip_through_the_command_line(tmp_path, capsys):
    out = tmp_path / "run"
    assert main(["encode", str(DEMO / "events.csv"), "--outcomes", str(DEMO / "outcomes.csv"),
                 "--out", str(out), "-q"]) == 0
    assert main(["mine", str(out / "sequences"), "--out", str(out / "patterns"),
                 "--min-support", "0.15", "--max-gap", "1", "--skip-pauses", "-q"]) == 0
    assert main(["contrast", str(out / "patterns"), "--sequences", str(out / "sequences"),
                 "--out", str(out / "patterns.csv"), "--bootstrap", "20", "-q"]) == 0
    assert main(["detectors", str(out / "patterns.csv"), "--sequences", str(out / "sequences"),
                 "--patterns", str(out / "patterns"), "--out", str(out / "detectors.json"),
                 "-q"]) == 0
    doc = load_detectors(out / "detectors.json")
    assert doc["matching"] == {"max_gap": 1, "max_window": None, "skip_pauses": True}
    capsys.readouterr()
    # the demo log as JSON lines, in file order
    lines = tmp_path / "events.jsonl"
    with open(DEMO / "events.csv", newline="", encoding="utf-8") as fh, \
            open(lines, "w", encoding="utf-8") as dst:
        for row in csv.DictReader(fh):
            dst.write(json.dumps(row) + "\n")
    assert main(["watch", str(out / "detectors.json"), str(lines), "--idle-timeout", "none"]) == 0
    live = Counter()
    for line in capsys.readouterr().out.splitlines():
        rec = json.loads(line)
        if rec["kind"] == "occurrence":
            live[(rec["learner"], rec["detector"])] += 1
    from seqmine.encoding.sequences import SequenceDB

    db = SequenceDB.load(out / "sequences")
    offline = _offline_counts(db, doc)
    # learners without an outcome are not in the encoded database; compare the rest
    known = set(db.learners.tolist())
    assert {k: v for k, v in live.items() if k[0] in known} == offline
    assert sum(offline.values()) > 0
