"""Numeric and session identifiers, with and without a pseudonymization key.

Learner ids that are numbers (``918273645`` in a CSV, a JSON number in a live event) and
session ids that contain them are common. With ``--pseudonymize`` no output file holds
them, the live watcher gives a JSON number the same pseudonym as its text and as the
offline run, and sessions are pseudonymized too; without a key the watcher names the
learner exactly as the offline run does. Pseudonyms are checked against Python's hmac
module (HMAC-SHA256, RFC 2104). Keys are refused when short or not random-looking, and
``seqmine keygen`` writes an owner-only key.
"""

import bisect
import hashlib
import hmac
import json
import os
import re
import stat

import pandas as pd
import pytest
from _run_helpers import FAST_TOML, digest
from seqmine.cli.main import main

from seqmine.demo_data import write_greenhouse

BASE_ID = 918273645


def _pseudonym(key, text):
    return "p_" + hmac.new(key, text.encode(), hashlib.sha256).hexdigest()[:16]


@pytest.fixture(scope="module")
def numeric_data(tmp_path_factory):
    d = tmp_path_factory.mktemp("ids")
    write_greenhouse(d, n_learners=80, random_state=6, events_per_learner=(20, 30))
    ev = pd.read_csv(d / "events.csv", dtype=str, keep_default_na=False)
    ids = {old: str(BASE_ID + k) for k, old in enumerate(sorted(ev["learner"].unique()))}
    ev["learner"] = ev["learner"].map(ids)
    ev["session"] = ev["learner"] + "-s1"
    ev.to_csv(d / "events.csv", index=False)
    oc = pd.read_csv(d / "outcomes.csv", dtype=str)
    oc["learner"] = oc["learner"].map(ids)
    oc.to_csv(d / "outcomes.csv", index=False)
    (d / "fast.toml").write_text(FAST_TOML.replace("[validate]\n", "[validate]\nenabled = false\n")
                                 + "[detectors]\nmin_stability = 0\n")
    assert main(["keygen", str(d / "k.key"), "-q"]) == 0
    return d, sorted(ids.values())


def _analyze(d, out, *extra):
    assert main(["analyze", str(d / "events.csv"), "--outcomes", str(d / "outcomes.csv"),
                 "--out", str(out), "--config", str(d / "fast.toml"), "--unit", "session",
                 "-q", *map(str, extra)]) == 0
    return out


@pytest.fixture(scope="module")
def runs(numeric_data, tmp_path_factory):
    d, _ = numeric_data
    root = tmp_path_factory.mktemp("id-runs")
    return {"plain": _analyze(d, root / "plain"),
            "key": _analyze(d, root / "key", "--pseudonymize", d / "k.key")}


def test_no_numeric_or_session_id_in_any_output(numeric_data, runs):
    d, ids = numeric_data
    out = runs["key"]
    pattern = re.compile("|".join(ids))
    for rel in digest(out):
        text = (out / rel).read_bytes().decode("utf-8", errors="replace")
        assert not pattern.search(text), rel
    key = (d / "k.key").read_bytes().strip()
    meta = json.loads((out / "sequences" / "sequences.json").read_text(encoding="utf-8"))
    assert set(meta["learners"]) <= {_pseudonym(key, i) for i in ids}
    assert set(meta["sessions"]) <= {_pseudonym(key, f"{i}-s1") for i in ids}
    # without a key the same ids are kept as text
    plain = json.loads((runs["plain"] / "sequences" / "sequences.json").read_text())
    assert set(plain["learners"]) <= set(ids) and set(plain["sessions"]) <= {
        f"{i}-s1" for i in ids}


def _watch(capsys, tmp_path, detectors, events, *extra):
    path = tmp_path / "live.jsonl"
    path.write_text("".join(json.dumps(e) + "\n" for e in events), encoding="utf-8")
    capsys.readouterr()
    assert main(["watch", str(detectors), str(path), "--cooldown", "0", *map(str, extra)]) == 0
    cap = capsys.readouterr()
    return [json.loads(line) for line in cap.out.splitlines()], cap.err


def _gap_in(edges, i):
    """A pause (seconds) that falls in pause bin ``i`` (bins split at ``edges``), or None."""
    lo = edges[i - 1] if i > 0 else 0.0
    hi = edges[i] if i < len(edges) else lo * 2 + 10.0
    gap = (lo + hi) / 2
    return gap if bisect.bisect_right(edges, gap) == i else None


def _live_events(detectors, learner_value, session_value):
    """Live events that complete the first detector's pattern: its actions, with gaps
    that fall in its pause tokens' bins (and in an implicit bin between two actions)."""
    doc = json.loads(detectors.read_text(encoding="utf-8"))
    pause = doc["encoding"]["pause"]
    edges, labels = pause["edges"], pause["labels"]
    quiet = next((_gap_in(edges, i) for i, lab in enumerate(labels)
                  if lab in pause["implicit"]), None)
    for det in doc["detectors"]:
        t, pending, events = 1000.0, None, []
        for tok in det["tokens"]:
            if tok.startswith("pause:"):
                pending = _gap_in(edges, labels.index(tok[len("pause:"):]))
                if pending is None:
                    break
                continue
            gap = pending if pending is not None else quiet
            if gap is None:
                break
            t, pending = t + gap, None
            events.append({"learner": learner_value, "time": t, "action": tok,
                           "session": session_value})
        else:
            if pending is not None:  # a pattern ending in a pause fires at the next event
                events.append({"learner": learner_value, "time": t + pending,
                               "action": det["tokens"][0], "session": session_value})
            return events
    pytest.skip("no detector of this small data set can be completed by a short stream")


def test_live_numeric_ids_get_the_offline_pseudonyms(numeric_data, runs, tmp_path, capsys):
    d, _ = numeric_data
    key = (d / "k.key").read_bytes().strip()
    det = runs["key"] / "detectors.json"
    session = f"{BASE_ID}-s1"
    as_number, err = _watch(capsys, tmp_path, det, _live_events(det, BASE_ID, session),
                            "--pseudonymize", d / "k.key")
    as_text, _ = _watch(capsys, tmp_path, det, _live_events(det, str(BASE_ID), session),
                        "--pseudonymize", d / "k.key")
    assert as_number and as_number == as_text
    assert {f["learner"] for f in as_number} == {_pseudonym(key, str(BASE_ID))}
    assert {f["sequence"] for f in as_number} == {_pseudonym(key, f"{BASE_ID}-s1")}
    assert str(BASE_ID) not in err and str(BASE_ID) not in json.dumps(as_number)
    # without a key: the learner as the offline run names it (the number as text)
    plain_det = runs["plain"] / "detectors.json"
    plain, _ = _watch(capsys, tmp_path, plain_det, _live_events(plain_det, BASE_ID, session))
    assert plain and {f["learner"] for f in plain} == {str(BASE_ID)}


def test_weak_keys_are_refused_and_keygen_writes_an_owner_only_key(tmp_path, capsys):
    key = tmp_path / "new.key"
    assert main(["keygen", str(key), "-q"]) == 0
    assert stat.S_IMODE(os.stat(key).st_mode) == 0o600
    text = key.read_text().strip()
    assert re.fullmatch(r"[0-9a-f]{64}", text)
    capsys.readouterr()
    assert main(["keygen", str(key), "-q"]) == 2  # never overwrites a key
    assert "already exists" in capsys.readouterr().err and key.read_text().strip() == text
    for weak, fragment in ((b"\0" * 16, "different byte value"),
                           (b"1111111111111111", "different byte value"),
                           (b"short", "at least 16 random bytes")):
        (tmp_path / "weak.key").write_bytes(weak)
        assert main(["encode", str(tmp_path / "e.csv"), "--outcomes", str(tmp_path / "o.csv"),
                     "--out", str(tmp_path / "o"), "--pseudonymize",
                     str(tmp_path / "weak.key"), "-q"]) == 2
        assert fragment in capsys.readouterr().err
    assert main(["watch", str(tmp_path / "d.json"), "--pseudonymize", str(tmp_path)]) == 2
    assert "is a folder, not a key file" in capsys.readouterr().err
