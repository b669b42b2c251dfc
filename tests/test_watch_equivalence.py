"""The watcher's per-learner firing counts equal offline instance counts exactly."""

from __future__ import annotations

from collections import Counter

from _watch_reference import (
    brute_instance_count,
    max_disjoint,
    occurrences,
    reference_tokens,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqmine.detection.watcher import EventError, Watcher
from seqmine.mining.miner import match

ACTIONS = ["set", "run", "measure", "paint", "reset"]
LABELS = ["short", "medium", "long"]


@st.composite
def scenario(draw):
    n_events = draw(st.integers(0, 28))
    learners = ["a", "b", "c"][: draw(st.integers(1, 3))]
    clock = {lr: 0.0 for lr in learners}
    events = []
    use_target = draw(st.booleans())
    use_session = draw(st.booleans())
    for _ in range(n_events):
        lr = draw(st.sampled_from(learners))
        clock[lr] += draw(st.sampled_from([0.0, 0.5, 1.0, 2.0, 4.0, 9.0, 30.0]))
        e = {"learner": lr, "time": clock[lr], "action": draw(st.sampled_from(ACTIONS))}
        if use_target:
            e["target"] = draw(st.sampled_from(["p1", "p2"]))
        if use_session:
            e["session"] = draw(st.sampled_from(["s1", "s2"]))
        events.append(e)
    # arrival order: by time across learners (ties keep generation order)
    order = sorted(range(len(events)), key=lambda i: (events[i]["time"], i))
    events = [events[i] for i in order]
    strategy = draw(st.sampled_from(["none", "fixed"]))
    if strategy == "fixed":
        edges = draw(st.sampled_from([[1.0, 5.0], [0.5, 2.0], [2.0, 10.0]]))
        implicit = draw(st.sampled_from([[], ["short"], ["medium"], ["short", "long"]]))
        pause = {"strategy": "fixed", "edges": edges, "labels": LABELS, "implicit": implicit}
    else:
        pause = {"strategy": "none", "edges": [], "labels": [], "implicit": []}
    mapping = draw(st.sampled_from([{}, {"paint": ""}, {"reset": "set"}, {"paint": "", "run": "measure"}]))
    template = "{action}:{target}" if use_target and draw(st.booleans()) else "{action}"
    unit = draw(st.sampled_from(["learner", "session"]))
    encoding = {"template": template, "mapping": mapping,
                "collapse_repeats": draw(st.booleans()), "unit": unit,
                "session_gap": draw(st.sampled_from([None, 5.0, 20.0])) if unit == "session" else None,
                "pause": pause}
    symbols = sorted({template.format(action=mapping.get(a, a) or "set", target=tg)
                      for a in ACTIONS for tg in ("p1", "p2")})
    pause_toks = ["pause:" + lab for lab in pause["labels"] if lab not in pause["implicit"]]
    alphabet = symbols + pause_toks
    n_det = draw(st.integers(1, 6))
    dets = []
    for k in range(n_det):
        toks = draw(st.lists(st.sampled_from(alphabet), min_size=1, max_size=4))
        dets.append({"id": f"D{k}", "tokens": toks,
                     "direction": draw(st.sampled_from(["discourage", "encourage"]))})
    matching = {"max_gap": draw(st.sampled_from([None, 0, 1, 2])),
                "max_window": draw(st.sampled_from([None, 2, 3, 5])),
                "skip_pauses": draw(st.booleans())}
    doc = {"format": "seqmine-detectors", "version": 1, "encoding": encoding,
           "matching": matching, "detectors": dets}
    return events, doc


def _watch_counts(events, doc, **kw):
    w = Watcher(doc, idle_timeout=None, **kw)
    counts = Counter()
    firings = []
    for e in events:
        try:
            fs = w.process(dict(e))
        except EventError:
            continue
        for f in fs:
            if f.kind == "occurrence":
                counts[(f.learner, f.detector)] += 1
                firings.append(f)
    return counts, firings


def _offline_counts(events, doc):
    seqs = reference_tokens(events, doc["encoding"])
    m = doc["matching"]
    counts = Counter()
    for learner, ss in seqs.items():
        for seq in ss:
            names = [tok for tok, _t in seq]
            for d in doc["detectors"]:
                n = brute_instance_count(names, d["tokens"], m["max_gap"], m["max_window"],
                                         m["skip_pauses"])
                if n:
                    counts[(learner, d["id"])] += n
    return counts, seqs


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenario())
def test_watcher_counts_equal_brute_force_offline_counts(case):
    events, doc = case
    live, firings = _watch_counts(events, doc)
    offline, seqs = _offline_counts(events, doc)
    assert live == offline
    # every firing reports one time per pattern token, in time order
    lengths = {d["id"]: len(d["tokens"]) for d in doc["detectors"]}
    for f in firings:
        assert len(f.event_times) == lengths[f.detector]
        assert list(f.event_times) == sorted(f.event_times)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.sampled_from(["a", "b", "p"]), max_size=10),
       st.lists(st.sampled_from(["a", "b", "p"]), min_size=1, max_size=3),
       st.sampled_from([None, 0, 1, 2]), st.sampled_from([None, 1, 2, 4]), st.booleans())
def test_reference_greedy_count_is_the_maximum_disjoint_count(seq, pat, gap, win, skip):
    # the earliest-end greedy is optimal for disjoint intervals (interval scheduling);
    # check the test's own reference against an exhaustive search
    seq = ["pause:long" if x == "p" else x for x in seq]
    pat = ["pause:long" if x == "p" else x for x in pat]
    spans = occurrences(seq, pat, gap, win, skip)
    assert brute_instance_count(seq, pat, gap, win, skip) == max_disjoint(spans)


def test_hand_worked_counts():
    # a b a b a b with pattern a>b contiguous: 3 instances; pattern a>a (gap <= 1):
    # occurrences (0,2), (2,4) overlap at 2 -> greedy takes (0,2) only -> 1 instance
    doc = {"format": "seqmine-detectors", "version": 1, "encoding": {"template": "{action}"},
           "matching": {"max_gap": 1, "max_window": None, "skip_pauses": False},
           "detectors": [{"id": "ab", "tokens": ["a", "b"], "direction": "discourage"},
                         {"id": "aa", "tokens": ["a", "a"], "direction": "discourage"}]}
    events = [{"learner": "x", "time": i, "action": a} for i, a in enumerate("ababab")]
    counts, firings = _watch_counts(events, doc)
    assert counts == {("x", "ab"): 3, ("x", "aa"): 1}
    aa = [f for f in firings if f.detector == "aa"][0]
    assert aa.event_times == (0.0, 2.0)


def test_pause_tokens_take_positions_and_skip_pauses():
    # set, (30 s -> pause:long), run: with max_gap 0 'set > run' needs skip_pauses
    enc = {"template": "{action}", "pause": {"strategy": "fixed", "edges": [10.0],
                                             "labels": ["short", "long"], "implicit": ["short"]}}
    events = [{"learner": "x", "time": 0, "action": "set"},
              {"learner": "x", "time": 30, "action": "run"},
              {"learner": "x", "time": 31, "action": "set"},
              {"learner": "x", "time": 32, "action": "run"}]
    for skip, expected in ((False, 1), (True, 2)):
        doc = {"format": "seqmine-detectors", "version": 1, "encoding": enc,
               "matching": {"max_gap": 0, "max_window": None, "skip_pauses": skip},
               "detectors": [{"id": "sr", "tokens": ["set", "run"], "direction": "discourage"},
                             {"id": "sp", "tokens": ["set", "pause:long"],
                              "direction": "discourage"}]}
        counts, firings = _watch_counts(events, doc)
        assert counts[("x", "sr")] == expected
        assert counts[("x", "sp")] == 1
        sp = [f for f in firings if f.detector == "sp"][0]
        # the pause token carries the time of the event it follows
        assert sp.event_times == (0.0, 0.0) and sp.time == 30.0


def test_one_partial_match_per_node_bounds_memory():
    doc = {"format": "seqmine-detectors", "version": 1, "encoding": {"template": "{action}"},
           "matching": {"max_gap": 50, "max_window": None, "skip_pauses": False},
           "detectors": [{"id": "d", "tokens": ["a", "b", "a", "c"], "direction": "discourage"},
                         {"id": "e", "tokens": ["a", "b", "b"], "direction": "discourage"}]}
    w = Watcher(doc, idle_timeout=None)
    for i in range(500):
        w.process({"learner": "x", "time": i, "action": "abab"[i % 4]})
    # one entry per trie node that has children: a, a>b, a>b>a
    assert len(w._learners["x"].nodes) <= w.n_nodes_
    assert all(isinstance(v, tuple) for v in w._learners["x"].nodes.values())


def _encoder_counts(events, doc):
    """Offline counts from the project's Encoder (rebuilt from the file's encoding)."""
    import pandas as pd

    from seqmine.encoding.encoder import Encoder

    if not events:
        return Counter(), None
    df = pd.DataFrame(events)
    for col in ("session", "target", "channel"):
        if col not in df.columns:
            df[col] = ""
    # the loader rejects exact duplicates (keeping the first); the Encoder expects that
    df = df[~df.duplicated(["learner", "time", "action", "session", "target", "channel"])]
    db = Encoder.from_encoding(doc["encoding"]).transform(df)
    m = doc["matching"]
    counts = Counter()
    for i in range(db.n_sequences):
        names = db.decode(i)
        for d in doc["detectors"]:
            n = brute_instance_count(names, d["tokens"], m["max_gap"], m["max_window"],
                                     m["skip_pauses"])
            if n:
                counts[(str(db.learners[i]), d["id"])] += n
    return counts, db


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenario())
def test_watcher_counts_equal_counts_on_the_encoders_token_stream(case):
    events, doc = case
    live, _ = _watch_counts(events, doc)
    offline, db = _encoder_counts(events, doc)
    assert live == offline
    if db is not None:
        # the test's reference tokeniser agrees with the Encoder token for token
        ref = reference_tokens(events, doc["encoding"])
        flat = [s for lr in sorted(ref) for s in ref[lr]]
        assert [[tok for tok, _t in s] for s in flat] == [db.decode(i) for i in range(db.n_sequences)]
        assert [[t for _tok, t in s] for s in flat] == [db.times[db.offsets[i]:db.offsets[i + 1]].tolist()
                                                         for i in range(db.n_sequences)]


def _match_counts(db, doc):
    """Offline counts from the miner's matcher on the Encoder's SequenceDB."""
    m = doc["matching"]
    index = {v: i for i, v in enumerate(db.vocab)}
    usable = [d for d in doc["detectors"] if all(t in index for t in d["tokens"])]
    counts = Counter()
    if not usable or db.n_sequences == 0:
        return counts
    ps = match(db, [tuple(index[t] for t in d["tokens"]) for d in usable],
                    max_gap=m["max_gap"], max_window=m["max_window"], skip_pauses=m["skip_pauses"])
    mat = ps.counts.tocoo()
    for i, j, v in zip(mat.row, mat.col, mat.data):
        if v:
            counts[(str(db.learners[i]), usable[j]["id"])] += int(v)
    return counts


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenario())
def test_watcher_counts_equal_the_miners_match_counts(case):
    events, doc = case
    live, _ = _watch_counts(events, doc)
    _, db = _encoder_counts(events, doc)
    offline = _match_counts(db, doc) if db is not None else Counter()
    assert live == offline
