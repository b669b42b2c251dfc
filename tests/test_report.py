"""Tests of the HTML report: sections, tolerance, escaping, determinism, command line."""

import html.parser
import json
import re

import numpy as np
import pandas as pd
import pytest
from browser_helper import check_report_scripts
from report_fixture import HOSTILE, write_output_folder

from seqmine.cli.main import main
from seqmine.errors import DataFileError
from seqmine.reporting import plots as _plots
from seqmine.reporting.render import OUTPUT_FILES, REPORT_FILE, _read_csv, render_report

SECTION_IDS = ["overview", "patterns", "explorer", "transitions", "phases", "early-prediction",
               "detectors", "method", "cautions"]


class _Collector(html.parser.HTMLParser):
    """Every start tag with its attributes, plus the page title."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.title, self._in_title = [], "", False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_title = tag == "title"

    def handle_endtag(self, tag):
        self._in_title = False

    def handle_data(self, data):
        if self._in_title:
            self.title += data


def _parse(text):
    c = _Collector()
    c.feed(text)
    return c


@pytest.fixture
def folder(tmp_path):
    return write_output_folder(tmp_path / "out")


def test_renders_every_section(folder):
    path = render_report(folder)
    assert path == folder / REPORT_FILE
    text = path.read_text(encoding="utf-8")
    ids = [a.get("id") for _, a in _parse(text).tags]
    for sid in SECTION_IDS:
        assert sid in ids
    assert "Not produced in this run" not in text
    # Numbers come through from the files.
    assert "1,210" in text and "10 (1%)" in text
    assert "Row accounting reconciles" in text
    assert "4 of 7 patterns differ reliably" in text
    assert "1 pattern that nearly duplicate" in text
    assert "Benjamini–Hochberg" in text
    # Figures are inline SVG, one per chart (2 boxes, 1 supports, 2 heatmaps,
    # 3 state diagrams, 1 occupancy, 2 prediction curves).
    assert text.count("<svg ") == 11
    assert "Try measuring before you reset." in text


def test_cautions_are_always_there(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    (folder / "patterns.csv").write_text("pattern,q_value\na > b,0.01\n")
    text = render_report(folder).read_text(encoding="utf-8")
    for phrase in ("not show that a way of working causes", "pilot them before they drive hints",
                   "data-protection law", "ethics review", "--pseudonymize"):
        assert phrase in text


@pytest.mark.parametrize("keep", [("summary.json",), ("patterns.csv", "transitions.csv")])
def test_missing_files_give_notes(tmp_path, keep):
    names = sorted(set(OUTPUT_FILES.values()) - {"phases"})
    folder = write_output_folder(tmp_path / "out", drop=[n for n in names if n not in keep])
    text = render_report(folder).read_text(encoding="utf-8")
    for name in names:
        if name in keep:
            assert f"({name} not found" not in text
        elif name == "examples.json":
            if "patterns.csv" in keep:
                assert "example excerpts: examples.json not found" in text
        elif name == "phases/phases.json":
            continue  # optional: model files are then found by their names
        else:
            assert f"Not produced in this run ({name} not found" in text, name
    # Sections are all there even when their files are not.
    ids = [a.get("id") for _, a in _parse(text).tags]
    assert all(sid in ids for sid in SECTION_IDS)


def test_only_summary(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    (folder / "summary.json").write_text(json.dumps({"groups": ["a", "b"]}))
    text = render_report(folder).read_text(encoding="utf-8")
    for name in ("patterns.csv", "transitions.csv", "early_prediction.csv", "detectors.json",
                 "phases/ not found"):
        assert f"Not produced in this run ({name}" in text


def test_missing_columns_and_corrupt_files(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    (folder / "patterns.csv").write_text("tokens,q\nx,1\n")
    (folder / "transitions.csv").write_text("group,from\ns,a\n")
    (folder / "early_prediction.csv").write_text("classifier,fraction\nc,0.5\n")
    (folder / "detectors.json").write_text("{not json")
    (folder / "summary.json").write_text("[1, 2]")
    text = render_report(folder).read_text(encoding="utf-8")
    assert "patterns.csv has no &#x27;pattern&#x27; column" in text
    assert "transitions.csv lacks column(s) to, adjusted_residual" in text
    assert "early_prediction.csv needs" in text
    assert "detectors.json could not be read (JSONDecodeError)" in text
    assert "summary.json does not hold a JSON object" in text


def test_flat_summary_layout_is_read(tmp_path):
    # Counts at the top level, group_names, pause edges as flat keys.
    folder = tmp_path / "o"
    folder.mkdir()
    (folder / "summary.json").write_text(json.dumps({
        "rows_in": 5, "rows_kept": 4, "rows_rejected": 1, "group_names": ["hi", "lo"],
        "learners_per_group": {"hi": 2, "lo": 1}, "sequences_per_group": {"hi": 2, "lo": 1},
        "rejects_by_reason": {"empty action": 1}, "pause_edges_seconds": [5.0, 30.0],
        "pause_labels": ["short", "medium", "long"], "grouping": {"rule": "median",
                                                                  "cut": 0.4}}))
    text = render_report(folder).read_text(encoding="utf-8")
    assert "Row accounting reconciles" in text
    assert "empty action" in text
    assert "30 s or more" in text and "pause:medium" in text
    assert "rule: median" in text


def test_no_significant_pattern(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    pd.DataFrame({"pattern": ["a > b", "b"], "support_s": [0.5, 0.4], "support_w": [0.4, 0.4],
                  "p_value": [0.2, 0.9], "q_value": [0.4, 0.9], "favours": ["", ""]}
                 ).to_csv(folder / "patterns.csv", index=False)
    text = render_report(folder).read_text(encoding="utf-8")
    assert "No pattern reached q ≤ 0.05" in text
    assert "None of the 2 patterns differs reliably" in text


def test_top_pattern_order_and_limit(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    q = [0.04, 0.001, 0.02, 0.5, 0.001]
    pd.DataFrame({"pattern": ["p0", "p1", "p2", "p3", "p4"], "q_value": q, "p_value": q,
                  "risk_difference": [0.1, 0.2, 0.1, 0.1, 0.4]}).to_csv(
        folder / "patterns.csv", index=False)
    text = render_report(folder, max_patterns=3).read_text(encoding="utf-8")
    shown = re.findall(r'class="rank">\d+\.</span><span class="tok">(p\d)<', text)
    # Smallest q first; ties broken by the larger absolute risk difference.
    assert shown == ["p4", "p1", "p2"]


def test_text_tokens_stay_text(tmp_path):
    (tmp_path / "patterns.csv").write_text("pattern,q_value,favours\nNA > null,0.01,\n"
                                           "None > nan,,\n")
    df = _read_csv(tmp_path, "patterns.csv", numeric=("q_value",)).value
    assert df["pattern"].tolist() == ["NA > null", "None > nan"]
    assert df["favours"].tolist() == ["", ""]
    assert df["q_value"].iloc[0] == 0.01 and np.isnan(df["q_value"].iloc[1])


def test_examples_switch_and_excerpts(folder):
    text = render_report(folder).read_text(encoding="utf-8")
    assert "learner L007" in text and 'class="ev hit"' in text
    assert "··· 42 s ···" in text and "+0:13" in text
    text = render_report(folder, examples=False).read_text(encoding="utf-8")
    assert "L007" not in text and "L012" not in text and 'class="ev' not in text
    assert "Example excerpts were switched off" in text


def test_byte_identical_and_path_independent(tmp_path):
    a = render_report(write_output_folder(tmp_path / "a")).read_bytes()
    b = render_report(write_output_folder(tmp_path / "b")).read_bytes()
    again = render_report(tmp_path / "a").read_bytes()
    assert a == b == again


def test_self_contained_no_urls(folder):
    text = render_report(folder).read_text(encoding="utf-8")
    assert not re.search(r"https?://", text)
    assert "<link" not in text.lower()
    assert "@import" not in text and "url(" not in text.replace("url(#fig", "")
    # the one script is the explorer's, allowed by its hash; the other is JSON data
    assert check_report_scripts(text) == 1
    for tag, attrs in _parse(text).tags:
        assert tag not in ("img", "iframe", "object", "embed", "link", "base")
        for k, v in attrs.items():
            assert not k.startswith("on")
            if k in ("href", "xlink:href", "src"):
                # in-page anchors, and the table beside the report (a link, not a load)
                assert v.startswith("#") or v == "patterns.csv", (tag, k, v)
    assert "default-src 'none'" in text  # Content-Security-Policy forbids scripts/loads


def test_explorer_script_is_allowed_by_its_hash_and_its_data_cannot_break_out(tmp_path):
    from seqmine.reporting.explorer import EXPLORER_SCRIPT, script_hash

    folder = write_output_folder(tmp_path / "evil", hostile=True)
    text = render_report(folder).read_text(encoding="utf-8")
    # reference: hashlib on the script text as it stands in the page
    import base64
    import hashlib
    body = re.search(r"<script>(.*?)</script>", text, flags=re.S).group(1)
    assert body == EXPLORER_SCRIPT
    digest = base64.b64encode(hashlib.sha256(body.encode("utf-8")).digest()).decode()
    assert f"script-src 'sha256-{digest}'" in text and script_hash() == f"'sha256-{digest}'"
    data = re.search(r'<script type="application/json" id="explorer-data">(.*?)</script>',
                     text, flags=re.S).group(1)
    assert not re.search(r"[<>&']", data)
    rows = json.loads(data)["rows"]
    patterns = pd.read_csv(folder / "patterns.csv", dtype=str, keep_default_na=False)["pattern"]
    assert [r[1] for r in rows] == patterns.tolist()  # every pattern, exactly as in the file


def test_without_patterns_there_is_no_script(tmp_path):
    folder = write_output_folder(tmp_path / "o", drop=("patterns.csv",))
    text = render_report(folder).read_text(encoding="utf-8")
    assert "<script" not in text and "script-src" not in text


def test_hostile_strings_are_escaped(tmp_path):
    folder = write_output_folder(tmp_path / "evil", hostile=True)
    text = render_report(folder).read_text(encoding="utf-8")
    low = text.lower()
    assert check_report_scripts(text) == 1  # the explorer's own script only
    assert "<img" not in low and "</svg></section>" not in low
    for raw in HOSTILE.values():
        if any(c in raw for c in "<>\"'&"):
            assert raw not in text
    assert "&lt;script&gt;document.title=&#x27;pwned&#x27;&lt;/script&gt;" in text
    parsed = _parse(text)
    assert parsed.title.startswith("seqmine report")
    for tag, attrs in parsed.tags:
        assert tag not in ("img", "iframe", "object", "embed")
        assert tag != "script" or attrs in ({}, {"type": "application/json",
                                                 "id": "explorer-data"}), attrs
        for k, v in attrs.items():
            assert not k.startswith("on"), (tag, k)
            assert not (v or "").strip().lower().startswith("javascript:"), (tag, k)
    # Every section still renders, and the group name with markup stays text.
    ids = [a.get("id") for _, a in parsed.tags]
    for sid in SECTION_IDS:
        assert sid in ids
    assert "weak &lt;b&gt;bold&lt;/b&gt;" in text
    # Mathtext is off: dollars are shown as typed inside the figures.
    assert "$x^2$ &amp; $$ paint_pot" in text


def test_svg_text_escaped_by_matplotlib():
    svg = _plots.svg_support_bars(["<script>x</script> > a\"b", "$\\alpha$ & </svg>"],
                                  {"g<1>": [0.5, 0.2]}, fig_id="t")
    assert "<script" not in svg and "&lt;script&gt;" in svg
    assert "$\\alpha$ &amp; &lt;/svg&gt;" in svg
    assert "g&lt;1&gt;" in svg
    assert svg.count("<svg") == 1 and svg.rstrip().endswith("</svg>")
    assert 'id="t-' in svg and "http" not in svg


def test_figure_ids_are_prefixed():
    a = _plots.svg_boxes({"x": {"min": 0, "q1": 1, "median": 2, "q3": 3, "max": 4}},
                         title="t", xlabel="x", fig_id="fig7")
    ids = re.findall(r'\bid="([^"]*)"', a)
    assert ids and all(i.startswith("fig7-") for i in ids)
    refs = re.findall(r"url\(#([^)]*)\)", a)
    assert all(r.startswith("fig7-") and r in ids for r in refs)


def test_state_diagram_handles_one_state_and_bad_matrix():
    svg = _plots.svg_state_diagram([{"name": "only", "emissions": [("a", 1.0)], "dwell": None}],
                                   np.array([[1.0]]), title="one", fig_id="s")
    assert "only" in svg
    svg = _plots.svg_state_diagram([{"name": "a"}, {"name": "b"}], None, title="t", fig_id="s")
    assert ">a<" in svg and ">b<" in svg


def test_bad_folder_errors(tmp_path):
    with pytest.raises(DataFileError, match="does not exist or is not a folder"):
        render_report(tmp_path / "nope")
    with pytest.raises(DataFileError, match="holds none of the files the report reads"):
        render_report(tmp_path)


def test_cli_report(folder, tmp_path, capsys):
    (folder / REPORT_FILE).unlink(missing_ok=True)
    assert main(["report", str(folder)]) == 0
    assert "Report written to" in capsys.readouterr().out
    assert (folder / REPORT_FILE).is_file()
    assert main(["report", str(folder), "--no-examples", "-q"]) == 0
    assert "L007" not in (folder / REPORT_FILE).read_text(encoding="utf-8")
    assert capsys.readouterr().out == ""
    assert main(["report", str(tmp_path / "missing")]) == 2
    err = capsys.readouterr().err
    assert "does not exist or is not a folder" in err and len(err.strip().splitlines()) == 1
    assert main(["report", str(folder), "--max-patterns", "0"]) == 2
    assert "--max-patterns must be" in capsys.readouterr().err


def test_outputs_doc_lists_every_key_the_report_reads():
    from pathlib import Path

    from seqmine.reporting import render as rep

    doc = (Path(__file__).resolve().parents[1] / "docs" / "outputs.md").read_text("utf-8")
    tables = [rep.SUMMARY_KEYS, rep.REJECT_COLUMNS, rep.PATTERN_COLUMNS, rep.TRANSITION_COLUMNS,
              rep.PHASE_MODEL_KEYS, rep.STATE_SELECTION_COLUMNS, rep.OCCUPANCY_COLUMNS,
              rep.PREDICTION_COLUMNS, rep.DETECTOR_KEYS, rep.EXAMPLE_KEYS]
    for table in tables:
        for key in table:
            last = re.split(r"\.|\[\]\.", key)[-1]
            assert f"`{key}`" in doc or f"`{last}`" in doc, key
    for name in rep.OUTPUT_FILES.values():
        assert f"`{name}" in doc, name


def test_stage_formats_are_read(folder):
    text = render_report(folder).read_text(encoding="utf-8")
    # Phases: phases.json names the files; state selection marks; occupancy by group.
    assert "phases/model_group-strong.json" in text and "Every model has 3 phases" in text
    assert "lowest BIC" in text and "best held-out" in text
    assert re.search(r"<td>S2 advance_week/measure_height</td><td class=num>55%</td>"
                     r"<td class=num>30%</td>", text)
    # Early prediction: the majority classifier is the baseline, not a curve;
    # earliest share at which each classifier beats it.
    assert "patterns: from 50% of the sequence." in text
    assert "action frequencies and pauses: from 75% of the sequence." in text
    assert "majority baseline: from" not in text
    # Detectors: priority 1 first, absence rule, notice, nested evidence, counts.
    assert text.index("D001") < text.index("D002")
    assert "Hints when the pattern has <b>not occurred</b> after 30 events of a sequence" \
        in text and "Hints when the pattern <b>occurs</b>." in text
    assert "Detectors come from correlational findings; pilot them first." in text
    assert re.search(r"<td><span class=\"swatch\"[^>]*></span><b>strong</b></td>"
                     r"<td class=num>20</td><td class=num>70%</td>", text)
    assert "odds ratio <b>9.330</b>" in text
    assert "2 detectors: 1 encourage, 1 discourage." in text
    assert "the steps of a pattern follow each other directly" not in text
    assert "at most 1 other tokens between two steps" in text
    # Summary: configuration sections are searched for method values.
    assert "Benjamini–Hochberg" in text and "Bootstrap resamples behind stability" in text
    assert "Permutations" not in text  # only shown for Westfall-Young


def test_switched_off_detector_and_bad_models(tmp_path):
    folder = tmp_path / "o"
    (folder / "phases").mkdir(parents=True)
    (folder / "detectors.json").write_text(json.dumps({"detectors": [
        {"id": "X", "pattern": "a > b", "direction": "encourage", "enabled": False},
        "not an object"]}))
    (folder / "phases" / "phases.json").write_text(json.dumps(
        {"models": {"pooled": "model_pooled", "evil": "../../summary"}}))
    (folder / "phases" / "model_pooled.json").write_text(json.dumps(
        {"vocab": ["a"], "emissionprob": [[1.0], [1.0]], "transmat": "oops"}))
    text = render_report(folder).read_text(encoding="utf-8")
    assert "switched off" in text and "No hint text yet." in text
    assert "1 detector: 1 encourage, 0 discourage; 1 switched off." in text
    # The model without a transition matrix still shows its states; the path that
    # leaves phases/ is ignored.
    assert "phases/model_pooled.json" in text and "summary" not in text.split(
        'id="phases"')[1].split('id="early-prediction"')[0]


def test_reject_reasons_get_their_meaning(tmp_path, monkeypatch):
    import sys
    import types

    fake = types.ModuleType("seqmine.inputs.load")
    fake.REJECT_REASONS = {"bad_time": "the time is <not> a time"}
    monkeypatch.setitem(sys.modules, "seqmine.inputs.load", fake)
    folder = tmp_path / "o"
    folder.mkdir()
    (folder / "rejects.csv").write_text("source_row,reason\n2,bad_time\n3,bad_time\n4,other\n")
    text = render_report(folder).read_text(encoding="utf-8")
    assert ("<td><code>bad_time</code></td><td>the time is &lt;not&gt; a time</td>"
            "<td class=num>2</td>") in text
    assert "<td><code>other</code></td><td></td><td class=num>1</td>" in text


def test_at_a_glance_names_the_strongest_patterns(folder):
    text = render_report(folder).read_text(encoding="utf-8")
    glance = text.split('class="keybox"')[1].split("</div>")[0]
    assert "Most reliable pattern more common among" in glance
    strong = glance.split("more common among")[1]
    assert "measure_height" in strong and "strong 70%, weak 20%" in strong
    assert ("Early recognition: the classifier on <b>patterns</b> beat the majority baseline "
            "from <b>50%</b> of the sequence on, with a balanced accuracy of 0.63; majority "
            "baseline accuracy 0.50") in glance
    assert "2 detectors exported for review: 1 encourage, 1 discourage." in glance


def test_first_screen_says_plainly_when_no_classifier_beats_the_baseline(tmp_path):
    folder = write_output_folder(tmp_path / "o")
    ep = pd.read_csv(folder / "early_prediction.csv")
    ep["beats_baseline"] = False
    ep.to_csv(folder / "early_prediction.csv", index=False)
    text = render_report(folder).read_text(encoding="utf-8")
    glance = text.split('class="keybox"')[1].split("</div>")[0]
    assert ('<span class="glance-no">No classifier beat the majority baseline</span> at any '
            "observed share of the sequence (25%, 50%, 75%, 100%;") in glance
    assert "not at any observed share" in text


def test_early_recognition_is_read_beside_an_activity_difference(tmp_path):
    import json

    folder = write_output_folder(tmp_path / "o")
    text = render_report(folder).read_text(encoding="utf-8")
    assert "read this accuracy beside the activity difference" not in text
    summary = json.loads((folder / "summary.json").read_text())
    summary["activity"] = {"p_value": 0.001, "ratio_of_means": 1.4,
                           "test": "Mann-Whitney U (two-sided) on events per learner"}
    (folder / "summary.json").write_text(json.dumps(summary))
    text = render_report(folder).read_text(encoding="utf-8")
    glance = text.split('class="keybox"')[1].split("</div>")[0]
    assert "read this accuracy beside the activity difference" in glance


def test_repetitions_and_fixed_groups_are_stated(tmp_path):
    folder = write_output_folder(tmp_path / "o")
    ep = pd.read_csv(folder / "early_prediction.csv")
    ep["n_repeats"] = np.where(ep["classifier"] == "frequency_pause", 1, 3)
    ep["balanced_accuracy_min"] = ep["balanced_accuracy"] - 0.04
    ep["balanced_accuracy_max"] = ep["balanced_accuracy"] + 0.03
    ep.to_csv(folder / "early_prediction.csv", index=False)
    summary = json.loads((folder / "summary.json").read_text())
    summary["grouping"] = {"rule": "fraction", "low": 0.1, "high": 0.45}
    summary["early_prediction"] = {"n_splits": 5, "n_repeats": 3, "n_repeats_hmm": 1,
                                   "learners_scored": 40, "groups_fixed_once": True}
    (folder / "summary.json").write_text(json.dumps(summary))
    text = render_report(folder).read_text(encoding="utf-8")
    glance = text.split('class="keybox"')[1].split("</div>")[0]
    assert ("balanced accuracy of 0.63 (range 0.59–0.66 over 3 repetitions); majority baseline "
            "accuracy 0.50 (5-fold cross-validation × 3 repetitions)") in glance
    assert ("decided once from the outcome table by the rule: top and bottom shares of the "
            "outcome, at or above 0.45 and at or below 0.10; the learners between get no "
            "group. The same groups were kept in every fold, so all 40 learners with a group "
            "were scored") in text
    assert "Run in 1 repetition only: <i>action frequencies and pauses</i>" in text
    assert "<th class=num>balanced accuracy range</th>" in text
    assert "<td class=num>0.59–0.66</td>" in text


def test_explorer_holds_at_most_explorer_rows_patterns(folder, capsys):
    text = render_report(folder, explorer_rows=2).read_text(encoding="utf-8")
    data = re.search(r'id="explorer-data">(.*?)</script>', text, flags=re.S).group(1)
    assert len(json.loads(data)["rows"]) == 2
    n = len(pd.read_csv(folder / "patterns.csv"))
    assert f"The table holds the first 2 of {n} patterns" in text
    assert main(["report", str(folder), "--explorer-rows", "0"]) == 2
    assert "--explorer-rows must be a whole number of at least 1" in capsys.readouterr().err


def test_explorer_shows_the_evidence_columns_when_the_table_has_them(tmp_path):
    # columns of the volume/order adjustment and the stable pattern id, when present
    folder = write_output_folder(tmp_path / "o")
    pat = pd.read_csv(folder / "patterns.csv", dtype=str, keep_default_na=False)
    n = len(pat)
    pat.insert(0, "pattern_id", [f"P{i:04d}" for i in range(n)])
    pat["q_volume"] = np.linspace(0.001, 0.5, n)
    pat["evidence"] = (["order", "presence", "volume", ""] * n)[:n]
    pat["replication"] = 0.8
    pat.to_csv(folder / "patterns.csv", index=False)
    text = render_report(folder).read_text(encoding="utf-8")
    data = json.loads(re.search(r'id="explorer-data">(.*?)</script>', text, flags=re.S)
                      .group(1))
    keys = [c["key"] for c in data["columns"]]
    assert keys[:2] == ["_rank", "pattern"] and keys[-2:] == ["pattern_id", "_redundant"]
    assert {"q_volume", "evidence", "replication"} <= set(keys)
    labels = {c["key"]: c["label"] for c in data["columns"]}
    assert labels["q_volume"] == "q (volume-adjusted)" and labels["evidence"] == "evidence"
    assert '<select id="ex-evidence">' in text and "the kind of evidence" in text
    assert [r[keys.index("evidence")] for r in data["rows"]] == pat["evidence"].tolist()


def test_survival_line_explains_more_findings_than_raw_significant():
    from seqmine.reporting.evidence import survival_lines

    summary = {"patterns_surviving": {"before_adjustment": 10, "volume_adjusted": 9,
                                      "order": 4},
               "patterns_by_evidence": {"order": 4, "presence": 7, "volume": 1}}
    line, = survival_lines(summary, 0.05)
    assert "10 before adjustment, 9 at equal activity" in line
    assert "corrected on its own" in line
    summary["patterns_by_evidence"] = {"order": 4, "presence": 5, "volume": 1}
    line, = survival_lines(summary, 0.05)
    assert "corrected on its own" not in line
