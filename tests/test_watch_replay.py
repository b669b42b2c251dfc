"""The demo's learners replayed through the watcher with the pipeline's detectors.

The detectors are exported by ``seqmine analyze`` with its default selection (both
directions, data-derived absence rules), and the watcher runs with its default
delivery policy: hints of both kinds must reach learners.
"""

import json
from pathlib import Path

import pandas as pd
import pytest

from seqmine.config import default_config
from seqmine.detection.detectors import load_detectors
from seqmine.detection.watcher import Watcher
from seqmine.pipeline import analyze

DEMO = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    cfg = default_config()
    cfg["phases"]["enabled"] = False
    cfg["validate"]["enabled"] = False
    cfg["contrast"]["n_bootstrap"] = 30
    out = tmp_path_factory.mktemp("replay")
    analyze(DEMO / "events.csv", DEMO / "outcomes.csv", out, cfg, quiet=True)
    return out


def _replay(doc, events, **kw):
    w = Watcher(doc, **kw)
    firings = []
    for e in events.to_dict("records"):
        firings.extend(w.process({k: v for k, v in e.items() if isinstance(v, str) and v}))
    return w, firings


def test_detectors_of_both_directions_are_exported_with_their_evidence(demo_run):
    doc = load_detectors(demo_run / "detectors.json")
    dets = doc["detectors"]
    by_dir = {d: [x for x in dets if x["direction"] == d] for d in ("encourage", "discourage")}
    # default balance: half of the 20 slots each, as long as both directions have candidates
    assert len(by_dir["encourage"]) == len(by_dir["discourage"]) == 10
    summary = json.loads((demo_run / "summary.json").read_text())
    assert summary["detectors_by_direction"] == {"encourage": 10, "discourage": 10}
    for det in dets:
        ev = det["evidence"]
        assert set(ev["support"]) == set(ev["rate"]) == {"strong", "weak"}
        assert ev["q_value"] <= 0.05 and ev["n"]["strong"] > 0
        ex = det["example"]
        assert ex["group"] == det["favours"] and any(e.get("matched") for e in ex["events"])
        matched = [e["token"] for e in ex["events"] if e.get("matched")]
        assert matched == det["tokens"]
        for tok in det["tokens"]:
            if tok.startswith("pause:"):  # the length of each pause, in seconds
                assert ev["pause_ranges"][tok].endswith((" s", " s or more"))
        if det["direction"] == "encourage":
            assert det["absence"]["after_events"] >= len(det["tokens"]) - sum(
                t.startswith("pause:") for t in det["tokens"])


def test_replaying_the_demo_learners_delivers_hints_of_both_kinds(demo_run):
    doc = load_detectors(demo_run / "detectors.json")
    events = pd.read_csv(DEMO / "events.csv", dtype=str, keep_default_na=False)
    learners = sorted(events["learner"].unique())[:40]
    events = events[events["learner"].isin(learners)]
    events = events.sort_values(["time", "learner"], kind="mergesort")
    w, firings = _replay(doc, events)
    delivered = [f for f in firings if not f.suppressed]
    kinds = {(f.direction, f.kind) for f in delivered}
    assert ("discourage", "occurrence") in kinds
    assert ("encourage", "absence") in kinds
    # neither direction drowns the other: each has at least a fifth of the hints
    n_enc = sum(f.direction == "encourage" for f in delivered)
    assert 0.2 <= n_enc / len(delivered) <= 0.8, (n_enc, len(delivered))
    assert w.stats["hints"] == len(delivered)
    # completed encourage patterns are counted, not hinted (documented default)
    assert all(f.reason == "no_hint" for f in firings
               if f.direction == "encourage" and f.kind == "occurrence")
