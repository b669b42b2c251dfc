"""The run record in summary.json and stage re-runs inside an output folder.

``analyze`` writes one record (stages with settings, inputs and output checksums); a
sub-command that re-runs a stage in the folder updates it in one step and removes the
outputs that depended on the old result. The central scenario: ``analyze`` (Benjamini-
Hochberg), then ``seqmine contrast DIR --correction holm --redundancy none``, then
``seqmine report DIR``: every count and method statement of the page and the summary
agrees with the new contrast, and the stale detectors are gone and marked. Holm's
adjusted p values are checked against statsmodels' ``multipletests`` (Holm 1979).
"""

import hashlib
import html
import json
import re
import shutil

import numpy as np
import pandas as pd
import pytest
from _run_helpers import analyze_argv, digest, leftovers, make_data
from seqmine.cli.main import main
from statsmodels.stats.multitest import multipletests

from seqmine._util.csvio import read_csv


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("record")
    data = make_data(root / "data", n_learners=40, seed=8)
    out = root / "run"
    assert main(analyze_argv(data, out, "-q")) == 0
    return root, data, out


def _summary(folder):
    return json.loads((folder / "summary.json").read_text(encoding="utf-8"))


def _text(page):
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", page)).split())


def test_analyze_writes_one_record(run):
    _, data, out = run
    s = _summary(out)
    assert s["record_version"] == 1
    assert [h["command"] for h in s["history"]] == ["analyze"]
    stages = s["stages"]
    order = ["load", "encode", "mine", "contrast", "transitions", "phases", "validate",
             "detectors", "examples", "report"]
    assert set(stages) == set(order) and s["history"][0]["ran"] == order
    assert all(e["status"] == "done" and e["step"] == 1 for e in stages.values())
    ev = stages["load"]["inputs"]["events"]
    raw = (data / "events.csv").read_bytes()
    assert ev == {"path": str(data / "events.csv"), "bytes": len(raw),
                  "sha256": hashlib.sha256(raw).hexdigest()}
    assert stages["contrast"]["inputs"] == {"mine": {"stage": "mine"},
                                            "encode": {"stage": "encode"}}
    assert stages["contrast"]["settings"]["correction"] == "bh"
    # every file of the folder is listed by exactly one stage, with its checksum
    listed = {rel: sha for e in stages.values() for rel, sha in e["outputs"].items()}
    files = digest(out)
    assert set(files) - {"summary.json"} == set(listed)
    assert all(files[rel] == sha for rel, sha in listed.items())


def test_contrast_rerun_then_report_agree_with_the_new_contrast(run, tmp_path, capsys):
    _, _, base = run
    out = tmp_path / "run"
    shutil.copytree(base, out)
    assert main(["contrast", str(out), "--correction", "holm", "--redundancy", "none",
                 "-q"]) == 0
    s = _summary(out)
    table = read_csv(out / "patterns.csv")
    alpha = s["method"]["alpha"]
    # the table is Holm's (Holm 1979; statsmodels' implementation as the reference)
    holm = multipletests(table["p_value"].to_numpy(float), method="holm")[1]
    assert np.allclose(table["q_value"].to_numpy(float), holm, rtol=1e-8, atol=1e-12)
    assert table["redundant_of"].isna().all()  # --redundancy none: nothing marked
    n_sig = int((table["q_value"] <= alpha).sum())
    assert n_sig > 0
    # the summary owns the new counts and method statements ...
    assert s["method"]["correction"] == "holm"
    assert s["configuration"]["contrast"]["correction"] == "holm"
    assert s["configuration"]["contrast"]["redundancy"] is None
    assert s["patterns_significant"] == n_sig == s["patterns_significant_distinct"]
    # ... the stale detectors are gone and marked, their count left the summary
    assert not (out / "detectors.json").exists() and "detectors" not in s
    assert s["stages"]["detectors"]["status"] == "removed"
    assert "contrast was re-run" in s["stages"]["detectors"]["reason"]
    # example excerpts were written again for the new table
    examples = json.loads((out / "examples.json").read_text(encoding="utf-8"))["patterns"]
    assert set(examples) <= set(table.loc[table["q_value"] <= alpha, "pattern_id"])
    assert [h["command"] for h in s["history"]] == ["analyze", "contrast", "contrast"]
    assert s["history"][1]["removed"] == ["detectors", "examples", "report"]

    assert main(["report", str(out), "-q"]) == 0
    page = _text((out / "report.html").read_text(encoding="utf-8"))
    assert "Holm step-down family-wise error control" in page
    assert "Benjamini" not in page
    assert f"{n_sig} of {len(table)} patterns differ reliably" in page
    assert "Not produced in this run (detectors removed: contrast was re-run" in page

    # new detectors from the new contrast, then the report shows them
    assert main(["detectors", str(out), "-q"]) == 0
    s = _summary(out)
    doc = json.loads((out / "detectors.json").read_text(encoding="utf-8"))
    assert s["detectors"] == len(doc["detectors"]) > 0
    sig_ids = set(table.loc[table["q_value"] <= alpha, "pattern_id"])
    assert {d["pattern_id"] for d in doc["detectors"]} <= sig_ids
    assert s["stages"]["report"]["status"] == "removed"
    assert main(["report", str(out), "-q"]) == 0
    assert [h["command"] for h in _summary(out)["history"]][-2:] == ["detectors", "report"]
    assert leftovers(out) == []


def test_a_hand_edited_file_is_used_and_said(run, tmp_path):
    _, _, base = run
    out = tmp_path / "run"
    shutil.copytree(base, out)
    doc = json.loads((out / "detectors.json").read_text(encoding="utf-8"))
    doc["detectors"][0]["hint"] = "Try changing one setting at a time."
    (out / "detectors.json").write_text(json.dumps(doc), encoding="utf-8")
    assert main(["report", str(out), "-q"]) == 0
    page = _text((out / "report.html").read_text(encoding="utf-8"))
    assert "Try changing one setting at a time." in page
    assert "detectors.json was changed after the run" in page


def test_a_stray_file_of_another_run_is_not_shown(run, tmp_path):
    _, data, full = run
    out = tmp_path / "lean"
    assert main(analyze_argv(data, out, "-q", "--no-validate")) == 0
    shutil.copy(full / "early_prediction.csv", out / "early_prediction.csv")
    assert main(["report", str(out), "-q"]) == 0
    page = _text((out / "report.html").read_text(encoding="utf-8"))
    assert "Not produced in this run (validate skipped: switched off" in page
    assert "Earliest reliable recognition" not in page


def test_stage_reruns_refuse_inputs_of_another_run(run, tmp_path, capsys):
    root, data, base = run
    out = tmp_path / "run"
    shutil.copytree(base, out)
    other = tmp_path / "other"
    shutil.copytree(base, other)
    before = digest(out)
    capsys.readouterr()
    assert main(["contrast", str(other / "patternset"), "--out", str(out / "patterns.csv"),
                 "-q"]) == 2
    assert "is not the pattern set of the run in" in capsys.readouterr().err
    assert main(["detectors", str(other / "patterns.csv"), "--out",
                 str(out / "detectors.json"), "-q"]) == 2
    assert "is not the contrast table of the run in" in capsys.readouterr().err
    other_events = tmp_path / "events.csv"
    other_events.write_bytes((data / "events.csv").read_bytes() + b"L9999,5,reset,pot1\n")
    assert main(["validate", str(other_events), "--outcomes", str(data / "outcomes.csv"),
                 "--out", str(out), "--splits", "2", "--bootstrap", "5", "-q"]) == 2
    assert "not the events file the run in" in capsys.readouterr().err
    assert digest(out) == before


def test_a_pseudonymized_rerun_leaves_no_raw_identifier(run, tmp_path):
    _, data, base = run
    out = tmp_path / "run"
    shutil.copytree(base, out)
    key = tmp_path / "k.key"
    assert main(["keygen", str(key), "-q"]) == 0
    assert main(analyze_argv(data, out, "-q", "--pseudonymize", key)) == 0
    ids = set(pd.read_csv(data / "events.csv", dtype=str)["learner"])
    pattern = re.compile("|".join(sorted(map(re.escape, ids), key=len, reverse=True)))
    for rel in digest(out):
        text = (out / rel).read_bytes().decode("utf-8", errors="replace")
        assert not pattern.search(text), rel
    assert _summary(out)["pseudonymized"] is True


def test_a_rerun_keeps_the_recorded_options_it_is_not_given(run, tmp_path):
    _, _, base = run
    out = tmp_path / "run"
    shutil.copytree(base, out)
    assert main(["contrast", str(out), "--correction", "holm", "--alpha", "0.1", "-q"]) == 0
    assert main(["contrast", str(out), "--redundancy", "none", "-q"]) == 0
    settings = _summary(out)["stages"]["contrast"]["settings"]
    assert (settings["correction"], settings["alpha"], settings["redundancy"]) == (
        "holm", 0.1, None)
    # a flag given with the default value still counts as given
    assert main(["contrast", str(out), "--correction", "bh", "-q"]) == 0
    s = _summary(out)
    assert s["stages"]["contrast"]["settings"]["correction"] == "bh"
    assert s["method"]["correction"] == "bh" and s["method"]["alpha"] == 0.1
