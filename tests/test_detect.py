"""Detectors file: selection, building, saving, loading and schema validation."""

from __future__ import annotations

import copy
import json

import numpy as np
import pandas as pd
import pytest

from seqmine.detection.detectors import (
    DETECTORS_VERSION,
    build_detectors,
    default_hint,
    load_detectors,
    save_detectors,
    select_detectors,
    validate_detectors,
)
from seqmine.errors import ColumnError, DataFileError, ParameterError, SeqmineWarning

ENCODING = {
    "template": "{action}", "mapping": {"open_guide": ""}, "collapse_repeats": False,
    "unit": "learner", "session_gap": None,
    "pause": {"strategy": "quantile", "edges": [4.0, 30.0], "labels": ["short", "medium", "long"],
              "implicit": ["short"], "bins": 3},
}


def _table():
    return pd.DataFrame({
        "pattern": ["set_light > set_water > advance_week", "set_light > set_water",
                    "set_light > advance_week > measure_height > pause:long", "paint_pot",
                    "reset", "measure_height > pause:long", "open_chart"],
        "length": [3, 2, 4, 1, 1, 2, 1],
        "support_strong": [0.1, 0.2, 0.6, 0.05, 0.1, 0.5, 0.3],
        "support_weak": [0.5, 0.55, 0.2, 0.4, 0.3, 0.3, 0.31],
        "p_value": [0.001, 0.002, 0.001, 0.003, 0.2, 0.01, 0.9],
        "q_value": [0.004, 0.006, 0.004, 0.008, 0.3, 0.03, 0.9],
        "q_volume": [0.004, 0.006, 0.004, 0.008, 0.3, 0.03, 0.9],
        "q_order": [0.004, 0.006, 0.004, None, None, 0.2, None],
        "evidence": ["order", "order", "order", "presence", "", "presence", ""],
        "favours": ["weak", "weak", "strong", "weak", "", "strong", ""],
        "risk_difference": [-0.4, -0.35, 0.4, -0.35, -0.2, 0.2, -0.01],
        "odds_ratio": [0.11, 0.2, 6.0, 0.08, 0.26, 2.3, 0.95],
        "cohens_h": [-0.9, -0.75, 0.82, -0.87, -0.5, 0.4, -0.02],
        "cliffs_delta": [-0.4, -0.35, 0.4, -0.35, -0.2, 0.2, -0.01],
        "stability": [0.95, 0.9, 0.92, 0.4, 0.5, 0.8, 0.1],
        "redundant_of": ["", "", "", "", "", "", ""],
    })


def _doc(**kw):
    rows = select_detectors(_table(), **kw)
    return build_detectors(rows, ENCODING, {"max_gap": 2, "max_window": 6, "skip_pauses": True},
                           group_names=["strong", "weak"], group_sizes=[150, 148],
                           vocabulary=["set_light", "set_water", "advance_week", "pause:long"],
                           absence_after_events=20)


# ------------------------------------------------------------------ selection
def test_select_filters_ranks_and_drops_redundant():
    rows = select_detectors(_table())
    # paint_pot fails stability; reset and open_chart fail q; 'set_light > set_water' is
    # contained in the larger-effect 'set_light > set_water > advance_week' (same group);
    # 'measure_height > pause:long' is contained in the strong 4-token pattern
    assert rows["pattern"].tolist() == ["set_light > set_water > advance_week",
                                        "set_light > advance_week > measure_height > pause:long"]
    kept = select_detectors(_table(), drop_redundant=False)["pattern"].tolist()
    assert kept == ["set_light > set_water > advance_week",
                    "set_light > advance_week > measure_height > pause:long",
                    "set_light > set_water", "measure_height > pause:long"]


def test_select_options():
    t = _table()
    assert select_detectors(t, groups="strong", drop_redundant=False)["favours"].eq("strong").all()
    assert select_detectors(t, lengths=(1, 2), drop_redundant=False)["pattern"].tolist() == [
        "set_light > set_water", "measure_height > pause:long"]
    assert select_detectors(t, lengths=[4])["length"].tolist() == [4]
    assert len(select_detectors(t, max_detectors=1)) == 1
    # ranked by the q of each row's own test (order 0.004, 0.004; presence 0.008)
    assert select_detectors(t, min_stability=0, min_effect=0.8)["pattern"].tolist() == [
        "set_light > set_water > advance_week",
        "set_light > advance_week > measure_height > pause:long", "paint_pot"]
    t.loc[0, "redundant_of"] = "set_light > set_water"
    assert "set_light > set_water > advance_week" not in select_detectors(t)["pattern"].tolist()


def test_select_ranks_by_the_q_value_of_the_evidence_that_survives_the_volume_adjustment():
    t = _table()
    # 'set_light > set_water' has the strongest order evidence, though a smaller effect
    t.loc[1, "q_order"] = 0.001
    got = select_detectors(t, drop_redundant=False)["pattern"].tolist()
    assert got == ["set_light > set_water", "set_light > set_water > advance_week",
                   "set_light > advance_week > measure_height > pause:long",
                   "measure_height > pause:long"]
    # tables without evidence (evidence=None): largest |effect| first, as before
    plain = select_detectors(t, evidence=None, drop_redundant=False)["pattern"].tolist()
    assert plain[:3] == ["set_light > set_water > advance_week",
                         "set_light > advance_week > measure_height > pause:long",
                         "set_light > set_water"]


def test_group_shares_split_the_slots_and_hand_unfilled_ones_on():
    t = pd.DataFrame({"pattern": [f"w{i}" for i in range(6)] + ["s0", "s1"],
                      "q_value": 0.01, "cohens_h": [0.9, 0.8, 0.7, 0.6, 0.5, 0.4, 0.3, 0.2],
                      "favours": ["weak"] * 6 + ["strong"] * 2})
    pick = lambda n, shares: select_detectors(  # noqa: E731
        t, min_stability=0, max_detectors=n, group_shares=shares,
        evidence=None)["pattern"].tolist()
    assert pick(4, None) == ["w0", "w1", "w2", "w3"]
    assert pick(4, {"strong": 0.5, "weak": 0.5}) == ["w0", "w1", "s0", "s1"]
    # 5 slots at 50/50: quotas 2.5/2.5, the remainder goes to the first group by name
    # ('strong'), which has only 2 rows, so its third slot goes to the best weak row left
    assert pick(5, {"strong": 1, "weak": 1}) == ["w0", "w1", "w2", "s0", "s1"]
    assert pick(3, {"strong": 1, "weak": 0}) == ["w0", "s0", "s1"]
    with pytest.raises(ParameterError, match="'group_shares' of select_detectors must be"):
        pick(3, {"strong": -1, "weak": 1})
    with pytest.raises(ParameterError, match="add up to 0"):
        pick(3, {"strong": 0, "weak": 0})


def test_select_defaults_to_findings_that_survive_the_volume_adjustment():
    t = _table()
    # the first pattern is now significant only before the volume adjustment
    t.loc[0, ["evidence", "q_volume", "q_order"]] = ["volume", 0.2, 0.5]
    default = select_detectors(t, drop_redundant=False)["pattern"].tolist()
    assert "set_light > set_water > advance_week" not in default
    assert default == ["set_light > advance_week > measure_height > pause:long",
                       "set_light > set_water", "measure_height > pause:long"]
    widened = select_detectors(t, drop_redundant=False,
                               evidence=["order", "presence", "volume"])["pattern"].tolist()
    assert widened[0] == "set_light > set_water > advance_week"
    assert select_detectors(t, evidence=None, drop_redundant=False)["pattern"].tolist() \
        == widened
    # a row is judged by the q value of its own test: an order finding needs q_order <= max_q
    t.loc[2, "q_order"] = 0.2
    assert "set_light > advance_week > measure_height > pause:long" not in \
        select_detectors(t, drop_redundant=False)["pattern"].tolist()
    assert select_detectors(t, evidence="order", drop_redundant=False)["pattern"].tolist() \
        == ["set_light > set_water"]


def test_select_messages():
    with pytest.raises(ColumnError, match=r"lacks column\(s\) evidence, q_volume, q_order\. "
                                          r"The table predates.*evidence=None"):
        select_detectors(_table().drop(columns=["evidence", "q_volume", "q_order"]))
    with pytest.raises(ParameterError, match=r"'evidence' parameter of select_detectors must "
                                             r"list some of order, presence, volume"):
        select_detectors(_table(), evidence=["beyond"])
    with pytest.raises(ColumnError, match=r"lacks column\(s\) stability.*min_stability=0"):
        select_detectors(_table().drop(columns="stability"))
    with pytest.raises(ColumnError, match=r"lacks column\(s\) hedges_g.*one of risk_difference"):
        select_detectors(_table(), effect="hedges_g")
    with pytest.raises(ParameterError, match=r"'max_q' parameter of select_detectors must be in \(0, 1\]"):
        select_detectors(_table(), max_q=2)
    with pytest.raises(ParameterError, match="'min_effect' parameter"):
        select_detectors(_table(), min_effect=-1)
    with pytest.raises(ParameterError, match="'min_stability' parameter of select_detectors must be in"):
        select_detectors(_table(), min_stability=1.5)
    with pytest.raises(ParameterError, match="'max_detectors' parameter"):
        select_detectors(_table(), max_detectors=0)
    with pytest.raises(ParameterError, match="'lengths' parameter"):
        select_detectors(_table(), lengths="two")
    with pytest.raises(ParameterError, match="needs the contrast table as a pandas DataFrame"):
        select_detectors([1, 2])
    t = _table()
    t["stability"] = np.nan
    with pytest.warns(SeqmineWarning, match="no stability values"):
        assert select_detectors(t).empty


# ------------------------------------------------------------------- building
def test_build_directions_evidence_and_hints():
    doc = _doc()
    assert doc["format"] == "seqmine-detectors" and doc["version"] == DETECTORS_VERSION
    assert doc["matching"] == {"max_gap": 2, "max_window": 6, "skip_pauses": True}
    assert doc["encoding"]["pause"]["edges"] == [4.0, 30.0]
    assert doc["groups"] == {"names": ["strong", "weak"], "strong": "strong", "weak": "weak",
                             "sizes": {"strong": 150, "weak": 148}}
    assert "pause:long" not in doc["vocabulary"]
    d0, d1 = doc["detectors"]
    assert (d0["id"], d0["direction"], d0["absence"]) == ("D001", "discourage", None)
    assert (d1["direction"], d1["absence"]) == ("encourage", {"after_events": 20, "after_seconds": None})
    assert d0["evidence"]["support"] == {"strong": 0.1, "weak": 0.5}
    assert d0["evidence"]["effects"]["cohens_h"] == -0.9
    assert d0["evidence"]["q_value"] == 0.004 and d0["evidence"]["stability"] == 0.95
    assert d0["hint"].startswith("Suggest (review before use)")
    assert "long pause" in d1["hint"]
    assert "educators must review" in doc["notice"].lower()


def test_build_messages():
    rows = select_detectors(_table())
    with pytest.raises(ParameterError, match="needs at least two group names"):
        build_detectors(rows, ENCODING, group_names=["strong"])
    with pytest.raises(ParameterError, match="'strong' group 'good' of build_detectors is not one"):
        build_detectors(rows, ENCODING, group_names=["strong", "weak"], strong="good")
    with pytest.raises(ParameterError, match="must differ"):
        build_detectors(rows, ENCODING, group_names=["strong", "weak"], strong="weak", weak="weak")
    bad = rows.copy()
    bad.loc[0, "favours"] = "middle"
    with pytest.raises(ParameterError, match=r"row 0 .* favours 'middle', neither the strong"):
        build_detectors(bad, ENCODING, group_names=["strong", "weak"])
    with pytest.raises(ColumnError, match="need columns 'pattern' and 'favours'"):
        build_detectors(rows.drop(columns="favours"), ENCODING, group_names=["strong", "weak"])
    with pytest.raises(ParameterError, match="has an empty token"):
        build_detectors(pd.DataFrame({"pattern": ["a >  > b"], "favours": ["weak"]}), ENCODING,
                        group_names=["strong", "weak"])


def test_default_hint_is_neutral_and_names_tokens():
    assert default_hint(["reset"], "discourage") == (
        "Suggest (review before use): the sequence 'reset' was more common among weak "
        "learners; consider prompting a different next step.")
    assert "try it" in default_hint(["a", "b"], "encourage")


# ---------------------------------------------------------------- round trip
def test_save_load_round_trip(tmp_path):
    doc = _doc()
    path = save_detectors(doc, tmp_path / "sub" / "detectors.json")
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    assert load_detectors(path) == json.loads(text) == doc


def test_build_writes_null_for_non_finite_evidence(tmp_path):
    rows = select_detectors(_table())
    rows.loc[0, "odds_ratio"] = np.inf
    rows.loc[0, "p_value"] = np.nan
    doc = build_detectors(rows, ENCODING, group_names=["strong", "weak"])
    assert doc["detectors"][0]["evidence"]["effects"]["odds_ratio"] is None
    assert doc["detectors"][0]["evidence"]["p_value"] is None
    save_detectors(doc, tmp_path / "d.json")


# --------------------------------------------------------- schema validation
def _edit(fn):
    doc = copy.deepcopy(_doc())
    fn(doc)
    return doc


def _set(path, value):
    def fn(doc):
        obj = doc
        for k in path[:-1]:
            obj = obj[k]
        obj[path[-1]] = value
    return fn


def _del(path):
    def fn(doc):
        obj = doc
        for k in path[:-1]:
            obj = obj[k]
        del obj[path[-1]]
    return fn


INVALID = [
    (_set(["format"], "other"), r"format: is 'other', expected 'seqmine-detectors'"),
    (_set(["version"], "1"), r"version: '1' is not a detectors file version"),
    (_set(["version"], 0), r"version: 0 is not a detectors file version"),
    (_set(["version"], 3), r"version 3 is newer than this seqmine reads \(version 2\); upgrade"),
    (_set(["detectrs"], []), r"detectrs: unknown field; did you mean 'detectors'\?"),
    (_set(["zzz"], 1), r"zzz: unknown field; allowed: created_by, detectors, encoding"),
    (_del(["matching"]), r"matching: is missing; export the detectors again"),
    (_del(["encoding"]), r"encoding: is missing"),
    (_del(["detectors"]), r"detectors: is missing"),
    (_set(["encoding"], []), r"encoding: must be an object"),
    (_set(["encoding", "template"], 5), r"encoding.template: 5 must be a string"),
    (_set(["encoding", "template"], "{actor}"), r"encoding.template: '\{actor\}' must use \{action\}"),
    (_set(["encoding", "template"], "{action"), r"encoding.template: '\{action' is malformed"),
    (_set(["encoding", "template"], "{action!r}"), r"encoding.template: .* uses a format spec or conversion"),
    (_set(["encoding", "mapping"], {"a": 1}), r"encoding.mapping: must be an object mapping"),
    (_set(["encoding", "collapse_repeats"], "yes"), r"encoding.collapse_repeats: 'yes' must be true or false"),
    (_set(["encoding", "unit"], "day"), r"encoding.unit: 'day' must be 'learner' or 'session'"),
    (_set(["encoding", "session_gap"], -5), r"encoding.session_gap: -5 must be a number of seconds > 0"),
    (_set(["encoding", "pause"], 3), r"encoding.pause: must be an object"),
    (_set(["encoding", "pause", "strategy"], "kmeans"), r"encoding.pause.strategy: 'kmeans' must be one of"),
    (_set(["encoding", "pause", "edges"], [30.0, 4.0]), r"encoding.pause.edges: \[30.0, 4.0\] must be strictly ascending"),
    (_set(["encoding", "pause", "edges"], ["4"]), r"encoding.pause.edges: must be a list of finite numbers"),
    (_set(["encoding", "pause", "labels"], ["short", "long"]), r"encoding.pause.labels: has 2 names for 2 edges"),
    (_set(["encoding", "pause", "labels"], ["a", "a", "b"]), r"encoding.pause.labels: .* has a repeated name"),
    (_set(["encoding", "pause", "labels"], ["a", "", "b"]), r"encoding.pause.labels: must be a list of non-empty"),
    (_set(["encoding", "pause", "implicit"], ["tiny"]), r"encoding.pause.implicit: \['tiny'\] must list bin names"),
    (_set(["encoding", "pause"], {"strategy": "none", "labels": ["x"]}), r"labels: must be empty when the pause strategy is 'none'"),
    (_set(["matching"], None), r"matching: must be an object"),
    (_set(["matching", "max_gap"], -1), r"matching.max_gap: -1 must be an integer >= 0 or null"),
    (_set(["matching", "max_gap"], 1.5), r"matching.max_gap: 1.5 must be an integer"),
    (_set(["matching", "max_window"], 0), r"matching.max_window: 0 must be an integer >= 1 or null"),
    (_set(["matching", "skip_pauses"], 1), r"matching.skip_pauses: 1 must be true or false"),
    (_set(["matching", "max_gaps"], 1), r"matching.max_gaps: unknown field; did you mean 'max_gap'\?"),
    (_set(["vocabulary"], "a b"), r"vocabulary: must be a list of action symbols"),
    (_set(["groups"], []), r"groups: must be an object"),
    (_set(["detectors"], {}), r"detectors: must be a list of detector objects"),
    (_set(["detectors", 1], "D2"), r"detectors\[1\]: must be an object"),
    (_set(["detectors", 0, "hnit"], "x"), r"detectors\[0\].hnit: unknown field; did you mean 'hint'\?"),
    (_del(["detectors", 1, "tokens"]), r"detectors\[1\].tokens: is missing"),
    (_set(["detectors", 1, "id"], ""), r"detectors\[1\].id: '' must be a non-empty string"),
    (_set(["detectors", 1, "id"], "D001"), r"detectors\[1\].id: 'D001' is also the id of detectors\[0\]"),
    (_set(["detectors", 0, "tokens"], []), r"detectors\[0\].tokens: must be a non-empty list"),
    (_set(["detectors", 0, "tokens"], ["a", 3]), r"detectors\[0\].tokens\[1\]: 3 must be a non-empty string"),
    (_set(["detectors", 0, "tokens"], ["a", "pause:short"]),
     r"detectors\[0\].tokens\[1\]: 'pause:short' is an implicit pause bin"),
    (_set(["detectors", 0, "tokens"], ["pause:huge"]),
     r"detectors\[0\].tokens\[0\]: 'pause:huge' is not a pause bin of this encoding \(bins: short, medium, long\)"),
    (_set(["detectors", 0, "direction"], "avoid"), r"detectors\[0\].direction: 'avoid' must be 'discourage' or 'encourage'"),
    (_set(["detectors", 0, "hint"], None), r"detectors\[0\].hint: must be a string"),
    (_set(["detectors", 0, "notes"], 3), r"detectors\[0\].notes: must be a string"),
    (_set(["detectors", 0, "favours"], 1), r"detectors\[0\].favours: must be a group name or null"),
    (_set(["detectors", 0, "priority"], -1), r"detectors\[0\].priority: -1 must be an integer >= 0"),
    (_set(["detectors", 0, "priority"], True), r"detectors\[0\].priority: True must be an integer"),
    (_set(["detectors", 0, "enabled"], "no"), r"detectors\[0\].enabled: 'no' must be true or false"),
    (_set(["detectors", 0, "evidence"], 3), r"detectors\[0\].evidence: must be an object"),
    (_set(["detectors", 1, "absence"], 5), r"detectors\[1\].absence: must be null or an object"),
    (_set(["detectors", 1, "absence"], {"after_events": 0}), r"detectors\[1\].absence.after_events: 0 must be an integer >= 1"),
    (_set(["detectors", 1, "absence"], {"after_seconds": -2}), r"detectors\[1\].absence.after_seconds: -2 must be a number > 0"),
    (_set(["detectors", 0, "absence"], {"after_events": 5}), r"detectors\[0\].absence: absence rules apply to encourage detectors only"),
]


@pytest.mark.parametrize("edit, message", INVALID)
def test_invalid_documents_give_one_line_messages(tmp_path, edit, message):
    doc = _edit(edit)
    path = tmp_path / "detectors.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    with pytest.raises(DataFileError, match=message) as info:
        load_detectors(path)
    assert "\n" not in str(info.value)
    assert str(info.value).startswith(str(path))


def test_not_an_object_and_file_problems(tmp_path):
    with pytest.raises(DataFileError, match="must hold a JSON object"):
        validate_detectors([1, 2])
    with pytest.raises(DataFileError, match="detectors file not found; create one with 'seqmine detectors'"):
        load_detectors(tmp_path / "missing.json")
    p = tmp_path / "broken.json"
    p.write_text('{"format": "seqmine-detectors",', encoding="utf-8")
    with pytest.raises(DataFileError, match=r"not valid JSON \(line 1, column \d+"):
        load_detectors(p)
    p.write_bytes(b"\xff\xfe\x00bad")
    with pytest.raises(DataFileError, match="not UTF-8 text"):
        load_detectors(p)
    doc = _doc()
    text = json.dumps(doc).replace('"q_value": 0.004', '"q_value": NaN', 1)
    p.write_text(text, encoding="utf-8")
    with pytest.raises(DataFileError, match="the JSON holds NaN, which is not plain JSON"):
        load_detectors(p)


def test_valid_edits_are_accepted(tmp_path):
    doc = _doc()
    doc["detectors"][0]["hint"] = "Try changing one setting at a time."
    doc["detectors"][0]["priority"] = 0
    doc["detectors"][0]["notes"] = "reviewed by the course team"
    doc["detectors"][1]["enabled"] = False
    doc["detectors"][1]["absence"] = None
    save_detectors(doc, tmp_path / "d.json")
    assert load_detectors(tmp_path / "d.json")["detectors"][0]["priority"] == 0
