"""Any content in the output files gives a page (never a crash) with every section.

A longer run for maintainers: ``SEQMINE_FUZZ_EXAMPLES=2000 pytest tests/test_report_fuzz.py``.
"""

import json
import os

import pytest
from browser_helper import check_report_scripts, start_tags
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqmine.reporting.render import render_report

JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6)
    | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=12),
    lambda kids: st.lists(kids, max_size=4) | st.dictionaries(st.text(max_size=10), kids,
                                                              max_size=4),
    max_leaves=12)

KEYS = st.sampled_from(["groups", "group_names", "counts", "rows_in", "rows_kept",
                        "learners_per_group", "gain_by_group", "pause_edges_seconds",
                        "pause_labels", "encoding", "configuration", "method", "detectors",
                        "patterns", "models", "states", "transmat", "emissionprob", "vocab",
                        "tokens", "priority", "evidence", "events", "n_states"])
OBJ = st.dictionaries(KEYS, JSON, max_size=6)
CELL = st.one_of(st.text(alphabet="ab >:<&\"'0123456789.-eNA", max_size=8),
                 st.sampled_from(["", "nan", "inf", "-1", "1e308", "true"]))
CSV_COLS = {
    "patterns.csv": ["pattern", "q_value", "p_value", "favours", "support_a", "support_b",
                     "redundant_of", "risk_difference"],
    "transitions.csv": ["group", "from", "to", "count", "adjusted_residual"],
    "early_prediction.csv": ["classifier", "fraction", "accuracy", "balanced_accuracy",
                             "beats_baseline", "baseline_accuracy"],
    "phases/occupancy_comparison.csv": ["measure", "state", "group_a", "group_b", "mean_a",
                                        "mean_b", "q_value"],
}


def _csv(columns, rows):
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(columns)
    for r in rows:
        w.writerow((r + [""] * len(columns))[:len(columns)])
    return buf.getvalue()


@pytest.mark.slow
@settings(max_examples=int(os.environ.get("SEQMINE_FUZZ_EXAMPLES", "15")), deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                   HealthCheck.function_scoped_fixture])
@given(summary=OBJ, detectors=OBJ, examples=OBJ, phases=OBJ, model=OBJ,
       rows=st.lists(st.lists(CELL, min_size=3, max_size=8), max_size=5),
       measure=st.sampled_from(["occupancy", "x"]))
def test_any_content_renders(tmp_path_factory, summary, detectors, examples, phases, model,
                             rows, measure):
    folder = tmp_path_factory.mktemp("fuzz")
    (folder / "phases").mkdir()
    (folder / "summary.json").write_text(json.dumps(summary))
    (folder / "detectors.json").write_text(json.dumps(detectors))
    (folder / "examples.json").write_text(json.dumps(examples))
    (folder / "phases" / "phases.json").write_text(json.dumps(phases))
    (folder / "phases" / "model_pooled.json").write_text(json.dumps(model))
    for name, cols in CSV_COLS.items():
        body = [[measure] + r for r in rows] if name.startswith("phases/") else rows
        (folder / name).write_text(_csv(cols, body))
    text = render_report(folder).read_text(encoding="utf-8")
    tags = start_tags(text)
    ids = {a.get("id") for _, a in tags}
    assert {"overview", "patterns", "explorer", "transitions", "phases", "early-prediction",
            "detectors", "method", "cautions"} <= ids
    assert not any(t in ("img", "iframe") for t, _ in tags)
    check_report_scripts(text)  # the explorer's own script and data only
