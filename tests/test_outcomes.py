"""Tests of outcomes: normalized gain and grouping rules."""

import numpy as np
import pandas as pd
import pytest

from seqmine.errors import NotFittedError, ParameterError, SeqmineInputError
from seqmine.inputs.outcomes import (
    Grouping,
    load_outcomes,
    match_learners,
    normalized_gain,
)


def test_gain_worked_values():
    # Source: Hake (1998), Am. J. Phys. 66(1), 64-74: <g> = (%post - %pre) / (100 - %pre);
    # on raw scores the same value (Bao 2006, Am. J. Phys. 74(10), 917): pre 12/30 ->
    # post 21/30 gives 0.5, as 40% -> 70% does.
    assert normalized_gain(12, 21, 30) == pytest.approx(0.5)
    assert normalized_gain(40, 70, 100) == pytest.approx(0.5)
    # Hake's class averages (from memory): traditional 0.23, interactive engagement 0.48
    # are gains; the formula on a pre of 30% and post of 46.1% gives 0.23.
    assert normalized_gain(30, 46.1, 100) == pytest.approx(0.23)
    # negative when post < pre; undefined (NaN) when pre == max
    assert normalized_gain(10, 5, 20) == pytest.approx(-0.5)
    assert np.isnan(normalized_gain(20, 20, 20))


def _outcomes(tmp_path, text, name="outcomes.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_load_gain_and_undefined(tmp_path):
    out = load_outcomes(_outcomes(tmp_path, "learner,pre,post,max\na,12,21,30\nb,30,30,30\n"))
    assert out.attrs["outcome_kind"] == "gain"
    assert out["gain"].iloc[0] == pytest.approx(0.5) and np.isnan(out["gain"].iloc[1])


def test_load_label_and_score(tmp_path):
    lab = load_outcomes(_outcomes(tmp_path, "learner,label\na,pass\nb,fail\n"))
    assert lab.attrs["outcome_kind"] == "label" and lab["label"].tolist() == ["pass", "fail"]
    sc = load_outcomes(_outcomes(tmp_path, "learner,score\na,3\nb,7\n", "s.csv"))
    assert sc["score"].tolist() == [3.0, 7.0]


def test_max_score_option(tmp_path):
    out = load_outcomes(_outcomes(tmp_path, "learner,pre,post\na,12,21\n"), max_score=30)
    assert out["gain"].item() == pytest.approx(0.5)


@pytest.mark.parametrize("text,match", [
    ("learner,pre,post,max\na,1,2,10\na,2,3,10\n", "learner 'a' appears on rows 1, 2"),
    ("learner,pre,post,max\na,1,12,10\n", r"row 1: post = 12 is above max = 10"),
    ("learner,pre,post,max\na,-1,2,10\n", "row 1: pre = -1 is negative"),
    ("learner,pre,post,max\na,1,,10\n", "row 1: post = '' is not a number"),
    ("learner,pre,post,max\na,1,nan,10\n", "row 1: post = 'nan' is not a number"),
    ("learner,pre,post,max\n,1,2,10\n", "row 1 has an empty learner"),
    ("student,pre,post,max\na,1,2,10\n", "'learner' is missing"),
    ("learner,x\na,1\n", "cannot tell the outcome form"),
    ("learner,pre,post,max\n", "no rows"),
])
def test_bad_outcomes(tmp_path, text, match):
    # DataFileError, or ColumnError for a missing column: both are SeqmineInputError
    with pytest.raises(SeqmineInputError, match=match):
        load_outcomes(_outcomes(tmp_path, text))


def test_median_split_rule():
    out = pd.DataFrame({"learner": list("abcdef"), "gain": [0.1, 0.2, 0.3, 0.3, 0.6, np.nan]})
    g = Grouping().fit(out)
    # median of the defined gains = 0.3; strictly above is strong, at or below weak
    assert g.thresholds_ == {"low": 0.3, "high": 0.3}
    assert g.transform(out).tolist()[:5] == ["weak", "weak", "weak", "weak", "strong"]
    assert pd.isna(g.transform(out).iloc[5])


def test_fraction_rule_leaves_middle_out():
    out = pd.DataFrame({"learner": [str(i) for i in range(9)], "gain": np.arange(9) / 10})
    g = Grouping("fraction", fraction=1 / 3).fit(out)
    # cut points are numpy quantiles of the training gains (reference: numpy.quantile)
    assert g.thresholds_["low"] == pytest.approx(np.quantile(np.arange(9) / 10, 1 / 3))
    labels = g.transform(out).tolist()
    assert labels[:3] == ["weak"] * 3 and labels[-3:] == ["strong"] * 3
    assert all(pd.isna(x) for x in labels[3:6])


def test_thresholds_and_label_rules():
    out = pd.DataFrame({"learner": list("abc"), "gain": [0.2, 0.5, 0.8]})
    assert Grouping("thresholds", low=0.3, high=0.7).fit_transform(out).tolist()[::2] == ["weak", "strong"]
    lab = pd.DataFrame({"learner": list("abc"), "label": ["hi", "lo", "hi"]})
    g = Grouping("label").fit(lab)
    assert g.group_names_ == ["hi", "lo"] and g.transform(lab).tolist() == ["hi", "lo", "hi"]


def test_grouping_learns_on_training_only():
    train = pd.DataFrame({"learner": list("ab"), "gain": [0.0, 1.0]})
    test = pd.DataFrame({"learner": list("cd"), "gain": [0.4, 0.6]})
    g = Grouping().fit(train)
    assert g.transform(test).tolist() == ["weak", "strong"]  # cut at train median 0.5


def test_grouping_errors():
    with pytest.raises(NotFittedError, match="not fitted"):
        Grouping().transform(pd.DataFrame({"learner": ["a"], "gain": [1.0]}))
    with pytest.raises(ParameterError, match="'fraction' parameter of Grouping"):
        Grouping("fraction", fraction=0.8).fit(pd.DataFrame({"learner": list("ab"), "gain": [0, 1.0]}))
    with pytest.raises(ParameterError, match="at least 2"):
        Grouping().fit(pd.DataFrame({"learner": ["a"], "gain": [1.0]}))
    with pytest.raises(ParameterError, match="low <= high"):
        Grouping("thresholds", low=0.7, high=0.3).fit(pd.DataFrame({"learner": list("ab"), "gain": [0, 1.0]}))


def test_match_learners_reports_both_directions():
    events = pd.DataFrame({"learner": ["a", "b", "x"]})
    out = pd.DataFrame({"learner": ["a", "b", "y", "z"], "gain": [0.1, 0.9, 0.5, np.nan]})
    groups = pd.Series(["weak", "strong", "strong", np.nan], dtype=object)
    mapping, rep = match_learners(events, out, groups)
    assert mapping == {"a": "weak", "b": "strong"}
    assert rep["events_without_outcome"] == ["x"]
    assert rep["outcomes_without_events"] == ["y", "z"]
    assert rep["outcome_undefined"] == ["z"]


def test_groups_indexed_by_learner_feed_the_encoder():
    # regression: transform returned a position-indexed Series, so encoding with
    # groups=... found no learner and every group came out empty
    from seqmine.encoding.encoder import encode
    out = pd.DataFrame({"learner": ["b", "a"], "gain": [0.9, 0.1]})
    groups = Grouping().fit_transform(out)
    assert groups.to_dict() == {"b": "strong", "a": "weak"}
    ev = pd.DataFrame({"learner": ["a", "b"], "time": [0.0, 0.0], "action": ["x", "y"]})
    db = encode(ev, groups=groups, group_names=["strong", "weak"], pause_strategy="none")
    assert db.groups.tolist() == [1, 0]
