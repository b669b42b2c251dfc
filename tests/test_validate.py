"""Cross-validation of the whole pipeline: no leakage, determinism, early prediction."""

import json

import numpy as np
import pandas as pd
import pytest
from _validate_toys import (
    MedianGrouping,
    QuantileEncoder,
    fisher_scorer,
    ngram_match,
    ngram_mine,
    planted_data,
)

from seqmine.errors import ParameterError
from seqmine.mining.miner import match, mine
from seqmine.validation.crossval import (
    CLASSIFIERS,
    _FoldRunner,
    default_featurizers,
    learner_splits,
    make_classifier,
    validate,
)

TOY = dict(miner=ngram_mine, matcher=ngram_match, scorer=fisher_scorer, max_gap=0)


def _feats(seed=0, **pattern):
    return default_featurizers(random_state=seed, pattern_params={**TOY, **pattern},
                               hmm_params=dict(n_states=2, n_restarts=1, n_iter=10))


def _run(ev, oc, **kw):
    kw.setdefault("n_splits", 3)
    kw.setdefault("fractions", [0.25, 0.5, 1.0])
    kw.setdefault("n_bootstrap", 200)
    kw.setdefault("n_repeats", 1)
    kw.setdefault("random_state", 0)
    kw.setdefault("grouping", MedianGrouping())
    feats = kw.pop("featurizers", None) or _feats(kw["random_state"])
    return validate(ev, oc, encoder=QuantileEncoder(), featurizers=feats, **kw)


@pytest.fixture(scope="module")
def planted():
    return planted_data(60, seed=1)


@pytest.fixture(scope="module")
def planted_result(planted):
    return _run(*planted)


def test_result_table_shape_and_columns(planted_result):
    r = planted_result
    t = r.to_frame()
    assert len(t) == len(CLASSIFIERS) * 3
    for col in ["classifier", "fraction", "accuracy", "accuracy_low", "accuracy_high",
                "balanced_accuracy", "balanced_accuracy_low", "balanced_accuracy_high",
                "recall_strong", "recall_weak", "roc_auc", "roc_auc_low", "roc_auc_high",
                "baseline_accuracy", "n_learners", "beats_baseline"]:
        assert col in t.columns
    assert (t["n_learners"] == 60).all()
    long = r.to_long()
    assert set(long["metric"]) == {"accuracy", "balanced_accuracy", "roc_auc", "recall_strong",
                                   "recall_weak"}
    assert len(long) == len(t) * 5
    # every learner held out exactly once
    assert r.folds["learner"].is_unique and len(r.folds) == 60
    p = r.predictions
    assert len(p) == 60 * 3 * len(CLASSIFIERS)


def test_ordering_signal_is_recognised_before_the_session_ends(planted_result):
    # the planted data differ only in the order of three actions (frequencies match)
    earliest = planted_result.earliest_fraction()
    assert earliest["pattern"] < 1.0
    t = planted_result.to_frame().set_index(["classifier", "fraction"])
    assert t.loc[("pattern", 0.5), "accuracy"] > t.loc[("majority", 0.5), "accuracy"]
    assert np.isnan(earliest.get("majority", np.nan))
    sustained = planted_result.earliest_fraction(sustained=True)
    both = earliest.notna() & sustained.notna()
    assert (sustained[both] >= earliest[both]).all()
    assert not (sustained.notna() & earliest.isna()).any()


def test_earliest_fraction_rules():
    from seqmine.validation.crossval import ValidationResult

    m = pd.DataFrame({"classifier": ["a"] * 3 + ["majority"] * 3, "fraction": [0.2, 0.5, 1.0] * 2,
                      "beats_baseline": [True, False, True, False, False, False]})
    r = ValidationResult(metrics=m, predictions=None, folds=None, selected_patterns={},
                         encodings={}, group_names=["strong", "weak"])
    assert r.earliest_fraction().to_dict() == {"a": 0.2}
    assert r.earliest_fraction(sustained=True).to_dict() == {"a": 1.0}


def _real_miner():
    return dict(TOY, miner=mine, matcher=match)


@pytest.mark.parametrize("steps", [lambda: TOY, _real_miner], ids=["brute-force", "miner"])
def test_planted_pattern_in_held_out_learners_only_is_never_selected(steps):
    ev, oc = planted_data(60, seed=2)
    grouping = MedianGrouping().fit(oc)
    lab = grouping.transform(oc)
    learners = np.array(sorted(oc["learner"]))
    split = learner_splits(learners, lab[learners].to_numpy(), n_splits=3, random_state=0)
    held0 = learners[split[0][1]]
    target = [lr for lr in held0 if lab[lr] == "weak"]
    # plant 'open_guide open_guide' at the end of the fold-0 held-out weak learners only
    extra = []
    for lr in target:
        t_end = ev.loc[ev.learner == lr, "time"].max()
        extra += [(lr, t_end + 1.0, "open_guide"), (lr, t_end + 2.0, "open_guide")]
    ev2 = pd.concat([ev, pd.DataFrame(extra, columns=ev.columns)], ignore_index=True)
    feats = default_featurizers(pattern_params={**steps(), "top_k": 500},
                                hmm_params=dict(n_states=2, n_restarts=1, n_iter=10))
    r = _run(ev2, oc, featurizers=feats, fractions=[1.0], n_bootstrap=10)
    sel = {k: [p for p in v if "open_guide" in p] for (_r, k), v in
           r.selected_patterns.items()}
    assert sel[0] == []
    # the same pattern is selected where it is in the training data (the check can fail)
    assert sel[1] and sel[2]
    assert r.folds.set_index("learner").loc[target, "fold"].eq(0).all()


def test_pause_edges_come_from_training_learners_and_groups_are_fixed_once():
    ev, oc = planted_data(45, seed=3)
    rng = np.random.default_rng(0)
    oc = oc.assign(score=rng.permutation(np.linspace(0, 1, len(oc))))
    r = _run(ev, oc, fractions=[1.0], n_bootstrap=10, classifiers=["frequency_pause"])
    all_edges = QuantileEncoder().fit(ev).encoding_["pause"]["edges"]
    full = MedianGrouping().fit(oc)
    for (_rep, k), enc in r.encodings.items():
        part = r.folds[r.folds["fold"] == k]
        train = sorted(set(ev.learner) - set(part.learner))
        edges = QuantileEncoder().fit(ev[ev.learner.isin(train)]).encoding_["pause"]["edges"]
        assert enc["pause"]["edges"] == edges
        assert edges != all_edges
        # the groups are labels decided once from the whole outcome table
        held = oc[oc.learner.isin(part.learner)]
        got = r.predictions[r.predictions.fold == k].drop_duplicates("learner")
        assert got.set_index("learner")["group"].to_dict() == full.transform(held).to_dict()
    assert r.settings["n_learners"] == len(oc)


def test_every_grouped_learner_is_scored_with_the_cut_points_of_the_outcome_table():
    # a thirds split on all outcomes: the middle third has no group, everyone else is
    # scored, with the groups the whole table gives (re-cutting inside folds would lose
    # learners between the training-fold cut points)
    from seqmine.inputs.outcomes import Grouping

    ev, oc = planted_data(60, seed=7)
    oc = oc.assign(score=np.linspace(0, 1, len(oc)))
    grouping = Grouping("fraction", fraction=1 / 3, value="score")
    expected = grouping.fit(oc).transform(oc).dropna()
    r = _run(ev, oc, fractions=[1.0], n_bootstrap=10, classifiers=["frequency_pause"],
             grouping=Grouping("fraction", fraction=1 / 3, value="score"))
    got = r.predictions.drop_duplicates("learner").set_index("learner")["group"]
    assert got.sort_index().to_dict() == expected.sort_index().to_dict()
    assert r.settings["n_learners"] == len(expected) == 40
    assert r.settings["grouping"]["rule"] == "fraction"
    assert r.settings["grouping"]["low"] == pytest.approx(np.quantile(oc["score"], 1 / 3))


def test_repeated_splits_deal_learners_anew_and_hmm_classifiers_repeat_less():
    ev, oc = planted_data(30, seed=8)
    one = _run(ev, oc, fractions=[0.5, 1.0], n_bootstrap=20, n_repeats=1)
    three = _run(ev, oc, fractions=[0.5, 1.0], n_bootstrap=20, n_repeats=3, n_repeats_hmm=1)
    f = three.folds
    assert sorted(f["repeat"].unique()) == [0, 1, 2]
    assert (f.groupby("repeat")["learner"].nunique() == 30).all()
    # the repetitions deal the learners into other folds
    by = f.pivot(index="learner", columns="repeat", values="fold")
    assert (by[0] != by[1]).any() and (by[1] != by[2]).any()
    n_rep = three.to_frame().groupby("classifier")["n_repeats"].first().to_dict()
    assert n_rep == {"pattern": 3, "frequency_pause": 3, "majority": 3, "hmm": 1, "fusion": 1}
    assert set(three.predictions.query("classifier == 'hmm'")["repeat"]) == {0}
    # repetition 0 is the single split
    cols = ["learner", "fraction", "proba_weak"]
    a = one.predictions.query("classifier == 'pattern'")[cols].reset_index(drop=True)
    b = three.predictions.query("classifier == 'pattern' and repeat == 0")[cols]
    pd.testing.assert_frame_equal(a, b.reset_index(drop=True))
    # the spread over repetitions brackets the mean
    t = three.to_frame()
    assert (t["accuracy_min"] <= t["accuracy"] + 1e-12).all()
    assert (t["accuracy_max"] >= t["accuracy"] - 1e-12).all()
    assert three.settings["n_repeats"] == 3 and three.settings["n_repeats_hmm"] == 1


def test_parallel_folds_give_identical_results():
    ev, oc = planted_data(30, seed=5)
    kw = dict(fractions=[0.5, 1.0], n_bootstrap=50)
    serial, parallel = _run(ev, oc, **kw), _run(ev, oc, n_jobs=2, **kw)
    pd.testing.assert_frame_equal(serial.to_frame(), parallel.to_frame())
    pd.testing.assert_frame_equal(serial.predictions, parallel.predictions)
    assert serial.selected_patterns == parallel.selected_patterns
    assert serial.encodings == parallel.encodings


def test_matched_training_changes_only_the_cut_fractions(planted, planted_result):
    matched = _run(*planted, train_on="matched", classifiers=["frequency_pause", "hmm"])
    full = planted_result.predictions
    cols = ["learner", "proba_weak"]
    for name in ["frequency_pause", "hmm"]:
        a = full.query("classifier == @name and fraction == 1.0")[cols].reset_index(drop=True)
        b = matched.predictions.query("classifier == @name and fraction == 1.0")[cols]
        pd.testing.assert_frame_equal(a, b.reset_index(drop=True))
        a = full.query("classifier == @name and fraction == 0.25")["proba_weak"].to_numpy()
        b = matched.predictions.query("classifier == @name and fraction == 0.25")["proba_weak"]
        assert not np.allclose(a, b.to_numpy())
    assert matched.settings["train_on"] == "matched"
    with pytest.raises(ParameterError, match="'train_on' parameter of validate"):
        _run(*planted, train_on="cut")


def test_save_and_summary(planted_result, tmp_path):
    out = planted_result.save(tmp_path / "v")
    t = pd.read_csv(out / "early_prediction.csv")
    assert list(t.columns) == list(planted_result.to_frame().columns)
    assert len(pd.read_csv(out / "early_prediction_long.csv")) == len(planted_result.to_long())
    info = json.loads((out / "validation_folds.json").read_text())
    assert len(info["folds"]) == 3 and info["settings"]["random_state"] == 0
    assert info["earliest_fraction"]["pattern"] == planted_result.earliest_fraction()["pattern"]
    digest = json.loads(json.dumps(planted_result.summary()))
    assert digest["accuracy"]["pattern"]["0.5"] == pytest.approx(
        planted_result.to_frame().query("classifier == 'pattern' and fraction == 0.5")
        ["accuracy"].item())
    assert set(digest["baseline_accuracy"]) == {"0.25", "0.5", "1"}


def _runner(ev, oc, grouping, **kw):
    groups = grouping.fit(oc).transform(oc)
    return _FoldRunner(events=ev.assign(learner=ev.learner.astype(str)),
                       groups=groups.to_dict(), group_names=grouping.group_names_,
                       encoder=QuantileEncoder(), featurizers=_feats(), C=1.0, **kw)


def test_pipeline_classifier_matches_the_fold_runner(planted):
    # make_classifier's scikit-learn Pipeline and the shared-featurizer fold runner agree
    ev, oc = planted
    tr = sorted(oc.learner)[:40]
    te = sorted(oc.learner)[40:]
    runner = _runner(ev, oc, MedianGrouping(), fractions=[1.0])
    out = runner((0, 0, tr, te, ["fusion", "majority"]))
    g = MedianGrouping().fit(oc)
    enc = QuantileEncoder().fit(ev[ev.learner.isin(tr)])
    db_tr, db_te = enc.transform(ev[ev.learner.isin(tr)]), enc.transform(ev[ev.learner.isin(te)])
    y_tr = g.transform(oc)[db_tr.learners].to_numpy()
    pipe = make_classifier("fusion", featurizers=_feats()).fit(db_tr, y_tr)
    got = out["predictions"].query("classifier == 'fusion'").set_index("learner")
    proba = pipe.predict_proba(db_te)
    np.testing.assert_allclose(got.loc[db_te.learners, "proba_weak"].to_numpy(), proba[:, 1],
                               rtol=1e-9, atol=1e-12)


def test_fold_runner_rejects_a_training_fold_with_one_group(planted):
    ev, oc = planted
    strong = sorted(oc.loc[oc.score > 0.5, "learner"])
    runner = _runner(ev, oc, MedianGrouping(), fractions=[1.0])
    with pytest.raises(ParameterError, match=r"Fold 2: the training learners hold only "
                                             r"group\(s\) 'strong'"):
        runner((0, 2, strong, sorted(oc.learner), ["pattern", "majority"]))


@pytest.mark.parametrize("kw, msg", [
    ({"fractions": [0.5, 1.5]}, r"Cut fraction 1\.5 is outside \(0, 1\]"),
    ({"fractions": [0]}, r"Cut fraction 0 is outside \(0, 1\]"),
    ({"fractions": []}, r"fractions is empty"),
    ({"n_splits": 61}, r"There are 60 learners but 61 folds"),
    ({"classifiers": ["svm"]}, r"Unknown classifier 'svm'"),
    ({"n_jobs": 0}, r"'n_jobs' parameter of validate"),
])
def test_validate_bad_input(planted, kw, msg):
    with pytest.raises(ParameterError, match=msg):
        _run(*planted, **kw)


def test_validate_group_smaller_than_folds(planted):
    ev, oc = planted
    oc = oc.copy()
    # two learners far above everyone: median split still gives two groups, so use
    # a threshold grouping where 'strong' is rare
    with pytest.raises(ParameterError, match=r"Group 'strong' has 2 learners, fewer than the "
                                             r"3 folds, so some fold would hold one group only"):
        validate(ev, oc, grouping=_TopTwo(), encoder=QuantileEncoder(), featurizers=_feats(),
                 n_splits=3)


class _TopTwo(MedianGrouping):
    def fit(self, outcomes):
        super().fit(outcomes)
        self.threshold_ = float(np.sort(outcomes["score"])[-3])
        return self


@pytest.mark.slow
def test_folds_on_a_local_dask_cluster_give_identical_results():
    # real (importable) stages only, since the folds run in other processes
    pytest.importorskip("distributed")
    from seqmine.encoding.encoder import Encoder
    from seqmine.inputs.outcomes import Grouping

    ev, oc = planted_data(30, seed=4)
    kw = dict(n_splits=3, fractions=[0.5, 1.0], n_bootstrap=50, grouping=Grouping(),
              encoder=Encoder(), classifiers=["frequency_pause"],
              featurizers={"frequency_pause": default_featurizers()["frequency_pause"]})
    serial = validate(ev, oc, **kw)
    on_dask = validate(ev, oc, n_jobs=2, scheduler="local", **kw)
    pd.testing.assert_frame_equal(serial.to_frame(), on_dask.to_frame())
    pd.testing.assert_frame_equal(serial.predictions, on_dask.predictions)


def test_leave_one_learner_out_and_its_baseline_artefact():
    ev, oc = planted_data(8, seed=6)
    r = _run(ev, oc, loo=True, fractions=[1.0], n_bootstrap=20,
             classifiers=["frequency_pause"])
    assert r.folds["fold"].nunique() == 8 and r.settings["loo"]
    assert set(r.predictions["learner"]) == set(oc["learner"])
    # fixed, balanced labels: the held-out learner is always the training minority, so
    # the majority baseline is always wrong (documented in validate's Notes)
    labelled = oc.assign(label=np.where(oc["score"] > 0.5, "strong", "weak"))
    r = validate(ev, labelled, loo=True, n_repeats=3, fractions=[1.0], n_bootstrap=20,
                 grouping=_FixedLabels(), encoder=QuantileEncoder(), featurizers=_feats(),
                 classifiers=["frequency_pause"])
    assert r.to_frame().query("classifier == 'majority'")["accuracy"].item() == 0.0
    assert r.settings["n_repeats"] == 1  # leave-one-out has one split only


class _FixedLabels:
    def fit(self, outcomes):
        self.group_names_ = ["strong", "weak"]
        return self

    def transform(self, outcomes):
        return pd.Series(outcomes["label"].to_numpy(), index=outcomes["learner"].to_numpy())
