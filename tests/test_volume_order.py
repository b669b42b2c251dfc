"""What the data support: volume artefacts, ordered behaviour and the demo's planted
behaviours come out with the evidence their construction implies; the new tests hold
their level on null data; the whole pipeline reports it."""

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from seqmine.mining.miner import mine
from seqmine.scoring.contrast import contrast
from seqmine.scoring.transitions import transitions

from _volume_order_logs import (
    EPISODE,
    frequency_only_db,
    null_db,
    opposite_order_db,
    session_db,
    to_event_log,
    volume_only_db,
)

DATA = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"
ALPHA = 0.05
MINING = dict(min_support=0.2, min_length=1, max_length=4, max_gap=0, skip_pauses=True,
              start_with_action=True)


def _score(db, **kw):
    ps = mine(db, **MINING)
    opts = dict(n_bootstrap=0, n_replication_splits=0, redundancy=None)
    opts.update(kw)
    return contrast(ps, db, **opts)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_volume_only_differences_do_not_survive_the_adjustment(seed):
    # same Markov process, strong learners 1.7x longer: the unadjusted test finds many
    # patterns, the volume-adjusted test at most one
    db = volume_only_db(seed)
    t = _score(db)
    assert (t["q_value"] < ALPHA).sum() > 50           # the artefact is there ...
    assert (t["q_volume"] < ALPHA).sum() <= 1            # ... and adjusted away
    assert (t["q_order"] < ALPHA).sum() <= 1
    assert t["evidence"].isin(["order", "presence"]).sum() <= 1
    assert (t.loc[t["evidence"] == "volume", "favours"] == "strong").all()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_opposite_orders_are_order_findings_for_the_right_group(seed):
    db = opposite_order_db(seed)
    t = _score(db, n_replication_splits=10).set_index("pattern")
    forward = " > ".join(EPISODE)
    backward = " > ".join(EPISODE[::-1])
    expect = {forward: "strong", backward: "weak",
              " > ".join(EPISODE[:2]): "strong", " > ".join(EPISODE[1:]): "strong",
              " > ".join(EPISODE[::-1][:2]): "weak", " > ".join(EPISODE[::-1][1:]): "weak"}
    for pattern, group in expect.items():
        row = t.loc[pattern]
        assert row["q_order"] < ALPHA, (pattern, row.to_dict())
        assert row["evidence"] == "order" and row["favours"] == group, pattern
        assert row["replication"] >= 0.8
    # the single items are used alike: no order to test, no presence difference
    for item in EPISODE:
        assert np.isnan(t.loc[item, "p_order"]) and t.loc[item, "evidence"] in ("", "volume")


@pytest.mark.slow
@pytest.mark.skipif(not (DATA / "ground_truth.json").is_file(), reason="no demo data")
def test_greenhouse_planted_behaviours_carry_the_evidence_their_construction_implies():
    # controlled comparison: an ordered episode of common actions -> order;
    # settings burst and decorating: rare actions (reset, paint_pot) that occur only in
    # the episode -> presence (beyond volume, not order); looking things up: neither
    from seqmine.encoding.encoder import Encoder
    from seqmine.inputs.load import load_events
    from seqmine.inputs.outcomes import load_outcomes
    from seqmine.pipeline import prepare_sequences

    truth = json.loads((DATA / "ground_truth.json").read_text(encoding="utf-8"))
    db = prepare_sequences(load_events(DATA / "events.csv"), load_outcomes(DATA / "outcomes.csv"),
                           encoder=Encoder()).db
    t = _score(db, n_replication_splits=20).set_index("pattern")
    implied = {"controlled_comparison": "order", "settings_burst": "presence",
               "decorating": "presence", "look_it_up": ""}
    for b in truth["behaviours"]:
        row = t.loc[" > ".join(b["key_pattern"])]
        assert row["evidence"] == implied[b["name"]], (b["name"], row.to_dict())
        expected = "" if b["direction"] == "neutral" else b["direction"]
        assert row["favours"] == expected
    # the full episode, the most common variant, is an order finding too
    full = t.loc[" > ".join(truth["behaviours"][0]["variants"][0])]
    assert full["evidence"] == "order" and full["favours"] == "strong"
    assert full["replication"] >= 0.5


def _null_rates(n_sets, seed0, ratio, correction="bh", n_groups=2, make=None):
    """Per new test, the share of null data sets with any q <= ALPHA (the family-wise
    error, which under the complete null equals the mean false discovery proportion)."""
    hits = {"q_volume": 0, "q_order": 0, "q_learners": 0}
    for s in range(n_sets):
        db = (make(seed0 + s) if make else
              null_db(seed0 + s, ratio=ratio, n_groups=n_groups))
        t = _score(db, correction=correction, n_permutations=99, random_state=s)
        hits["q_volume"] += bool((t["q_volume"] <= ALPHA).any())
        hits["q_order"] += bool((t["q_order"] <= ALPHA).any())
        tr = transitions(db)
        hits["q_learners"] += bool((tr["q_learners"] <= ALPHA).any())
    return hits


def _upper(n, p=ALPHA, q=0.999):
    """Largest count of hits compatible with rate p (binomial 99.9% quantile)."""
    return int(stats.binom.ppf(q, n, p))


@pytest.mark.slow
@pytest.mark.parametrize("ratio", [1.0, 1.7])
def test_new_tests_hold_their_level_on_null_data(ratio):
    # 40 generated null data sets per setting here (benchmarks/calibrate_evidence.py runs
    # 400 and docs/methods.md reports them); tolerance: binomial 99.9% upper bound
    n_sets = 40
    hits = _null_rates(n_sets, 7000 if ratio == 1.0 else 8000, ratio)
    for key, count in hits.items():
        assert count <= _upper(n_sets), (key, hits)


@pytest.mark.slow
def test_order_test_holds_its_level_when_only_item_frequency_differs():
    # strong learners use 'reset' twice as often, tokens in random order in both groups:
    # presence differs (q_volume is not under its null), the order test is
    hits = _null_rates(40, 9500, 1.0, make=frequency_only_db)
    assert hits["q_order"] <= _upper(40)
    assert hits["q_volume"] > _upper(40)  # the frequency difference itself is found


@pytest.mark.slow
def test_westfall_young_runs_hold_their_level_with_more_groups():
    hits = _null_rates(20, 9000, 1.7, correction="westfall-young", n_groups=3)
    assert hits["q_volume"] <= _upper(20) and hits["q_order"] <= _upper(20)


# ------------------------------------------------------------------ the pipeline
@pytest.fixture(scope="module")
def volume_run(tmp_path_factory):
    from seqmine.config import default_config
    from seqmine.pipeline import analyze

    root = tmp_path_factory.mktemp("volume")
    events, outcomes = to_event_log(volume_only_db(5, n_per_group=120))
    events.to_csv(root / "events.csv", index=False)
    outcomes.to_csv(root / "outcomes.csv", index=False)
    cfg = default_config()
    cfg["phases"]["enabled"] = False
    cfg["validate"]["enabled"] = False
    cfg["contrast"]["n_bootstrap"] = 20
    cfg["contrast"]["n_replication_splits"] = 10
    result = analyze(root / "events.csv", root / "outcomes.csv", root / "out", cfg, quiet=True)
    return root / "out", result


def test_analyze_reports_volume_findings_as_volume(volume_run):
    import pandas as pd

    out, result = volume_run
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    act = summary["activity"]
    assert act["p_value"] < 1e-6 and 1.4 < act["ratio_of_means"] < 2.0
    surv = summary["patterns_surviving"]
    assert surv["before_adjustment"] > 10 and surv["volume_adjusted"] <= 1
    pat = pd.read_csv(out / "patterns.csv", keep_default_na=False)
    for col in ("p_volume", "q_volume", "p_order", "q_order", "evidence", "favours",
                "replication"):
        assert col in pat.columns
    assert set(pat["evidence"]) <= {"", "volume", "presence", "order"}
    assert summary["patterns_by_evidence"]["volume"] == int((pat["evidence"] == "volume").sum())
    rep = pd.to_numeric(pat["replication"])
    found = pat["evidence"] != ""
    assert rep[found].between(0, 1).all() and rep[~found].isna().all()
    assert rep[pat["evidence"] == "volume"].max() >= 0.9  # the clearest ones replicate
    tokens = pd.read_csv(out / "tokens.csv", keep_default_na=False)
    assert set(tokens["kind"]) == {"action", "pause"} and (tokens["length"] == 1).all()
    # the detectors come only from findings that survive the volume adjustment
    det = json.loads((out / "detectors.json").read_text(encoding="utf-8"))
    assert all(d["evidence"]["kind"] in ("order", "presence") for d in det["detectors"])
    assert len(det["detectors"]) <= 1
    report = (out / "report.html").read_text(encoding="utf-8")
    assert "activity" in report.lower()


@pytest.mark.slow
def test_sessions_count_learners_once_unless_asked(tmp_path):
    from seqmine.config import default_config
    from seqmine.pipeline import analyze

    db = session_db(3, n_per_group=25)
    events, outcomes = to_event_log(db)
    # sessions: a new session value per sequence
    events["session"] = np.repeat(np.arange(db.n_sequences),
                                  [sum(1 for t in db.decode(i) if not t.startswith("pause:"))
                                   for i in range(db.n_sequences)])
    events.to_csv(tmp_path / "events.csv", index=False)
    outcomes.to_csv(tmp_path / "outcomes.csv", index=False)
    cfg = default_config()
    cfg["encode"]["unit"] = "session"
    cfg["phases"]["enabled"] = False
    cfg["validate"]["enabled"] = False
    cfg["contrast"]["n_bootstrap"] = 0
    learner = analyze(tmp_path / "events.csv", tmp_path / "outcomes.csv", tmp_path / "a", cfg,
                      quiet=True)
    assert learner.summary["unit_of_analysis"] == "learner"
    assert not [w for w in learner.summary["warnings"] if w["code"] == "sessions_not_independent"]
    cfg["contrast"]["unit"] = "sequence"
    session = analyze(tmp_path / "events.csv", tmp_path / "outcomes.csv", tmp_path / "b", cfg,
                      quiet=True)
    codes = [w["code"] for w in session.summary["warnings"]]
    assert "sessions_not_independent" in codes
    assert session.summary["unit_of_analysis"] == "sequence"
    report = (tmp_path / "b" / "report.html").read_text(encoding="utf-8")
    assert "session-level" in report


def test_report_groups_findings_by_evidence_and_states_activity_first(tmp_path):
    import pandas as pd
    from report_fixture import write_output_folder

    from seqmine.reporting.render import render_report

    folder = write_output_folder(tmp_path / "out")
    pat = pd.read_csv(folder / "patterns.csv", keep_default_na=False)
    pat["q_volume"] = [3e-4, 0.2, 0.03, 0.3, 0.9, 1.0, 3e-4]
    pat["q_order"] = [1e-3, 0.5, 0.4, 0.6, 0.9, "", 1e-3]
    pat["evidence"] = ["order", "volume", "presence", "", "", "", "order"]
    pat["replication"] = [0.9, 0.1, 0.5, 0.0, 0.0, 0.0, 0.9]
    pat.to_csv(folder / "patterns.csv", index=False)
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    summary.update({
        "activity": {"events_per_learner": {"strong": {"n": 20, "mean": 170.0},
                                            "weak": {"n": 20, "mean": 100.0}},
                     "test": "Mann-Whitney U (two-sided) on events per learner",
                     "p_value": 1e-5, "ratio_of_means": 1.7},
        "patterns_surviving": {"before_adjustment": 3, "volume_adjusted": 2, "order": 1},
        "patterns_by_evidence": {"order": 1, "presence": 1, "volume": 1},
        "unit_of_analysis": "sequence",
        "warnings": [{"code": "sessions_not_independent", "message": "x", "count": 1}]})
    (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    text = render_report(folder).read_text(encoding="utf-8")
    glance = text[text.index("At a glance"): text.index('id="overview"')]
    assert "strong</b> 170.0 events" in glance and "Ratio of means 1.70" in glance
    assert "The groups differ in how much they did" in glance
    assert "3 before adjustment, 2 at equal activity" in glance
    assert "1 order, 1 presence beyond activity, 1 activity only" in glance
    assert "session-level tests" in glance
    # the findings come grouped: order first, then presence, then activity only
    body = text[text.index('id="patterns"'): text.index('id="tokens"')]
    assert body.index("Order: 1 pattern") < body.index("Presence beyond activity: 1 pattern") \
        < body.index("Activity only: 1 pattern")
    assert "replication <b>0.90</b>" in body and "Replication</b> is the share" in body
    assert "What each group does more of" in text and "paint_pot" in \
        text[text.index('id="tokens"'): text.index('id="transitions"')]


def test_analyze_flags_and_their_messages(tmp_path, capsys):
    from seqmine.cli.commands.analyze import config_from_args
    from seqmine.cli.main import build_parser, main

    args = build_parser().parse_args(
        ["analyze", "e.csv", "--outcomes", "o.csv", "--out", "x", "--contrast-unit",
         "sequence", "--replication-splits", "5", "--evidence", "order,volume"])
    cfg = config_from_args(args)
    assert cfg["contrast"]["unit"] == "sequence" and cfg["contrast"]["n_replication_splits"] == 5
    assert cfg["detectors"]["evidence"] == ["order", "volume"]
    events, outcomes = to_event_log(null_db(1, n_per_group=6))
    events.to_csv(tmp_path / "e.csv", index=False)
    outcomes.to_csv(tmp_path / "o.csv", index=False)
    base = ["analyze", str(tmp_path / "e.csv"), "--outcomes", str(tmp_path / "o.csv"),
            "--out", str(tmp_path / "out"), "--quiet"]
    assert main(base + ["--evidence", "beyond"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "--evidence: expected a comma-separated list" in err
    cfg_file = tmp_path / "c.toml"
    for text, needle in [('[detectors]\nevidence = ["beyond"]\n',
                          "'detectors.evidence' lists 'beyond'"),
                         ('[contrast]\nunit = "session"\n', "'contrast.unit' must be one of")]:
        cfg_file.write_text(text, encoding="utf-8")
        assert main(base + ["--config", str(cfg_file)]) == 2
        err = capsys.readouterr().err.strip()
        assert err.count("\n") == 0 and needle in err, err


def test_report_survives_a_detectors_file_whose_encoding_is_not_an_object(tmp_path):
    # regression (found by the report fuzz test): the pause ranges of the data checks
    # read detectors.json's encoding, which a hand-edited file may hold as a list
    from seqmine.reporting.render import render_report

    (tmp_path / "detectors.json").write_text(json.dumps({"encoding": [None]}),
                                             encoding="utf-8")
    assert "<!DOCTYPE html>" in render_report(tmp_path).read_text(encoding="utf-8")


def test_token_table_says_when_every_token_is_everywhere():
    # Every learner does every action: the token presence tests cannot differ, and the
    # run says so about tokens.csv, not about the mined patterns.
    import warnings as _w

    from seqmine import SequenceDB
    from seqmine.errors import SeqmineWarning
    from seqmine.pipeline import score_tokens

    seqs = [["a", "b", "c"], ["c", "b", "a"], ["b", "a", "c"], ["a", "c", "b"]] * 3
    db = SequenceDB.from_lists(seqs, groups=["strong", "weak"] * 6)
    with _w.catch_warnings(record=True) as caught:
        _w.simplefilter("always")
        table = score_tokens(db, unit="sequence")
    codes = [getattr(w.message, "code", None) for w in caught
             if issubclass(w.category, SeqmineWarning)]
    assert "tokens_no_variation" in codes and "no_variation" not in codes
    assert (table["p_value"] == 1).all()
