"""Privacy of every output: pseudonymized learner identifiers, optional log excerpts.

``seqmine analyze --pseudonymize KEY_FILE`` runs on generated greenhouse data whose
learner identifiers are distinctive strings; every file written (CSV, JSON, GraphML,
HTML and the arrays inside ``.npz`` files) is scanned for any raw identifier. The
pseudonyms must be the same across runs with the same key (HMAC-SHA256, checked
against Python's hmac module) and different with another key. ``seqmine watch
--pseudonymize`` gives the same pseudonyms in its firings.
"""

import hashlib
import hmac
import json
import re

import numpy as np
import pandas as pd
import pytest

from seqmine.cli.main import main
from seqmine.demo_data import write_greenhouse

KEY_A = "3f9c1e0b7a5d42c8e6f1a9b0c7d3e5f2"
KEY_B = "0b1c2d3e4f5061728394a5b6c7d8e9f0"
DOMAIN = "school.example"
FAST_TOML = """
[phases]
min_states = 2
max_states = 2
n_restarts = 1
n_iter = 5
[validate]
n_splits = 2
fractions = [0.5, 1.0]
n_bootstrap = 10
top_k = 5
[contrast]
n_bootstrap = 5
"""


def raw_id(i):
    return f"pupil.{i:03d}@{DOMAIN}"


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    d = tmp_path_factory.mktemp("priv")
    write_greenhouse(d, n_learners=30, random_state=7, events_per_learner=(15, 30))
    ids = {}
    for name in ("events.csv", "outcomes.csv"):
        df = pd.read_csv(d / name, dtype=str, keep_default_na=False)
        ids.update({old: raw_id(k) for k, old in enumerate(sorted(df["learner"].unique()))
                    if old not in ids})
        df["learner"] = df["learner"].map(ids)
        df.to_csv(d / name, index=False)
    (d / "fast.toml").write_text(FAST_TOML)
    (d / "a.key").write_text(KEY_A + "\n")
    (d / "b.key").write_text(KEY_B + "\n")
    return d, sorted(ids.values())


def _analyze(capsys, d, out, *extra):
    rc = main(["analyze", str(d / "events.csv"), "--outcomes", str(d / "outcomes.csv"),
               "--out", str(out), "--config", str(d / "fast.toml"), "-q", *map(str, extra)])
    _, err = capsys.readouterr()
    assert rc == 0, err
    return out


@pytest.fixture(scope="module")
def runs(data, tmp_path_factory):
    """Full run with key A, a fast second run with key A, and one with key B."""
    d, _ = data
    base = tmp_path_factory.mktemp("runs")
    cap = _NoCapture()
    return {
        "a": _analyze(cap, d, base / "a", "--pseudonymize", d / "a.key"),
        "a2": _analyze(cap, d, base / "a2", "--pseudonymize", d / "a.key", "--no-phases",
                       "--no-validate"),
        "b": _analyze(cap, d, base / "b", "--pseudonymize", d / "b.key", "--no-phases",
                      "--no-validate"),
    }


class _NoCapture:
    """capsys stand-in for module fixtures (stderr is checked through the return code)."""

    def readouterr(self):
        return "", ""


def texts_of(path):
    """Every text a file holds: its bytes decoded, plus string arrays inside .npz."""
    if path.suffix == ".npz":
        out = []
        with np.load(path, allow_pickle=False) as z:
            for name in z.files:
                arr = z[name]
                out.append(name)
                if arr.dtype.kind in "US":
                    out.extend(str(x) for x in arr.ravel().tolist())
        return out
    return [path.read_bytes().decode("utf-8", errors="replace")]


def scan(folder, needles):
    """(file, needle) pairs where a raw identifier shows up."""
    hits = []
    files = sorted(p for p in folder.rglob("*") if p.is_file())
    assert files
    for p in files:
        for text in texts_of(p):
            low = text.lower()
            for n in needles:
                if n.lower() in low:
                    hits.append((str(p.relative_to(folder)), n))
    return hits, files


def pseudo(identifier, key):
    # reference: RFC 2104 HMAC-SHA256 from Python's hmac module, first 16 hex digits
    return "p_" + hmac.new(key.encode(), identifier.encode(), hashlib.sha256).hexdigest()[:16]


def test_no_raw_identifier_in_any_output(data, runs):
    _, ids = data
    hits, files = scan(runs["a"], ids + [DOMAIN])
    assert hits == []
    kinds = {p.suffix for p in files}
    # the scan saw every kind of output the run writes
    assert {".csv", ".json", ".html", ".graphml", ".npz"} <= kinds
    names = {str(p.relative_to(runs["a"])) for p in files}
    assert {"report.html", "detectors.json", "summary.json", "examples.json",
            "early_prediction.csv", "sequences/arrays.npz", "sequences/sequences.json"} <= names
    assert any(n.startswith("phases/") for n in names)
    assert any(n.startswith("patternset/") for n in names)


def _learners(out):
    meta = json.loads((out / "sequences" / "sequences.json").read_text())
    with np.load(out / "sequences" / "arrays.npz", allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    found = set()
    for v in list(arrays.values()) + [json.dumps(meta)]:
        text = " ".join(map(str, np.ravel(v).tolist())) if isinstance(v, np.ndarray) else v
        found |= set(re.findall(r"p_[0-9a-f]{16}", text))
    return found


def test_pseudonyms_are_keyed_hashes_consistent_across_runs(data, runs):
    _, ids = data
    want_a = {pseudo(i, KEY_A) for i in ids}
    want_b = {pseudo(i, KEY_B) for i in ids}
    got_a, got_a2, got_b = (_learners(runs[k]) for k in ("a", "a2", "b"))
    assert got_a and got_a == got_a2  # same key: same pseudonyms in both runs
    assert got_a <= want_a  # exactly the HMAC-SHA256 of the raw identifiers
    assert got_b <= want_b and not got_a & got_b  # another key: other pseudonyms
    summary = json.loads((runs["a"] / "summary.json").read_text())
    assert summary["pseudonymized"] is True


def test_watch_firings_use_the_same_pseudonyms(data, runs, tmp_path, capsys):
    d, ids = data
    ev = pd.read_csv(d / "events.csv", dtype=str, keep_default_na=False)
    lines = [json.dumps({"learner": r.learner, "time": r.time, "action": r.action})
             for r in ev.itertuples()]
    stream = tmp_path / "live.jsonl"
    stream.write_text("\n".join(lines) + "\n")
    det = runs["a"] / "detectors.json"
    doc = json.loads(det.read_text())
    if not doc["detectors"]:  # tiny data may give no detector: watch a frequent pair
        doc["detectors"] = [{"id": "D1", "tokens": ev["action"].iloc[:2].tolist(),
                             "direction": "discourage"}]
        det = tmp_path / "det.json"
        det.write_text(json.dumps(doc))
    rc = main(["watch", str(det), str(stream), "--pseudonymize", str(d / "a.key")])
    out, err = capsys.readouterr()
    assert rc == 0, err
    firings = [json.loads(x) for x in out.splitlines()]
    assert firings
    learners = {f["learner"] for f in firings}
    assert learners <= {pseudo(i, KEY_A) for i in ids}
    for needle in ids + [DOMAIN]:
        assert needle not in out and needle not in err
    # without the option the raw identifiers come out (the option is what hides them)
    rc = main(["watch", str(det), str(stream)])
    out, _ = capsys.readouterr()
    assert rc == 0 and DOMAIN in out


def test_watch_pseudonymize_keeps_rejections(data, tmp_path, capsys):
    d, _ = data
    det = tmp_path / "det.json"
    det.write_text(json.dumps({
        "format": "seqmine-detectors", "version": 1, "encoding": {"template": "{action}"},
        "matching": {"max_gap": 0, "max_window": None, "skip_pauses": False},
        "detectors": [{"id": "D1", "tokens": ["set_light", "advance_week"],
                       "direction": "discourage"}]}))
    lines = ['{"time": 1, "action": "set_light"}',                          # no learner
             '{"learner": "bad\\u0007id", "time": 1, "action": "set_light"}',  # control char
             '{"learner": "  ", "time": 1, "action": "set_light"}']          # empty
    stream = tmp_path / "live.jsonl"
    stream.write_text("\n".join(lines) + "\n")
    rc = main(["watch", str(det), str(stream), "--pseudonymize", str(d / "a.key")])
    _, err = capsys.readouterr()
    assert rc == 0
    skipped = [ln for ln in err.splitlines() if "event skipped" in ln]
    assert len(skipped) == 3
    assert "missing field 'learner'" in skipped[0]
    assert "control characters" in skipped[1] and "'learner' is empty" in skipped[2]
    rc = main(["watch", str(det), str(stream), "--pseudonymize", str(tmp_path / "none.key")])
    _, err = capsys.readouterr()
    assert rc == 2 and err.startswith("seqmine: error:") and "key file not found" in err


def test_no_examples_means_no_log_excerpts(data, runs, tmp_path, capsys):
    d, _ = data
    out = _analyze(capsys, d, tmp_path / "noex", "--no-examples", "--no-phases",
                   "--no-validate", "--pseudonymize", d / "a.key")
    assert not (out / "examples.json").exists()
    html = (out / "report.html").read_text(encoding="utf-8")
    # the excerpts of the run with examples name pseudonymized learners; none may appear
    with_examples = json.loads((runs["a"] / "examples.json").read_text())
    learners = set(re.findall(r"p_[0-9a-f]{16}", json.dumps(with_examples)))
    assert learners, "the run with examples should show excerpts"
    shown = (runs["a"] / "report.html").read_text(encoding="utf-8")
    assert set(re.findall(r"p_[0-9a-f]{16}", shown)) & learners  # excerpts name learners
    assert not re.search(r"p_[0-9a-f]{16}", html)
    assert "examples.json" not in html


@pytest.mark.parametrize("command, extra", [
    ("encode", []),
    ("validate", ["--splits", "2", "--fractions", "1", "--bootstrap", "10",
                  "--classifiers", "pattern", "--hmm-states", "2"]),
])
def test_encode_and_validate_pseudonymize_too(data, runs, tmp_path, capsys, command, extra):
    d, ids = data
    out = tmp_path / command
    rc = main([command, str(d / "events.csv"), "--outcomes", str(d / "outcomes.csv"),
               "--out", str(out), "-q", "--pseudonymize", str(d / "a.key"), *extra])
    _, err = capsys.readouterr()
    assert rc == 0, err
    hits, _ = scan(out, ids + [DOMAIN])
    assert hits == []
    found = set()
    for p in out.rglob("*"):
        if p.is_file():
            found |= {m for t in texts_of(p) for m in re.findall(r"p_[0-9a-f]{16}", t)}
    assert found and found <= {pseudo(i, KEY_A) for i in ids}
    if command == "encode":
        assert found == _learners(runs["a"])  # the same pseudonyms as analyze
