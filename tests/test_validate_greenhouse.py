"""Validation with the real stages on greenhouse demo data, and the command line."""

import re

import numpy as np
import pandas as pd
import pytest

from seqmine.cli.main import main
from seqmine.demo_data import generate_greenhouse, write_greenhouse
from seqmine.encoding.encoder import Encoder
from seqmine.inputs.load import parse_times
from seqmine.inputs.outcomes import Grouping, normalized_gain
from seqmine.phases import GroupHMMClassifier
from seqmine.validation.crossval import default_featurizers, validate
from seqmine.validation.features import HMMLikelihoodFeaturizer

FAST_HMM = dict(n_states=2, n_restarts=1, n_iter=20)




def _greenhouse(n, seed):
    d = generate_greenhouse(n, random_state=seed)
    ev = d.events.assign(time=parse_times(d.events["time"])[0])
    oc = d.outcomes.assign(gain=normalized_gain(d.outcomes["pre"], d.outcomes["post"],
                                                d.outcomes["max"]))
    return ev, oc


@pytest.fixture(scope="module")
def greenhouse_data():
    return _greenhouse(90, seed=7)


@pytest.fixture(scope="module")
def greenhouse_result(greenhouse_data):
    ev, oc = greenhouse_data
    return validate(ev, oc, n_splits=3, n_repeats=1, fractions=[0.25, 0.5, 1.0], n_bootstrap=300,
                    grouping=Grouping(), encoder=Encoder(),
                    featurizers=default_featurizers(random_state=0, hmm_params=FAST_HMM))


def test_pattern_classifier_beats_majority_before_the_session_ends(greenhouse_result):
    earliest = greenhouse_result.earliest_fraction()
    assert earliest["pattern"] < 1.0
    t = greenhouse_result.to_frame().set_index(["classifier", "fraction"])
    assert t.loc[("pattern", 0.5), "accuracy_low"] > 0.5


def test_selected_patterns_include_planted_behaviours(greenhouse_result):
    # the generator's key patterns (ground truth) should be among the selections
    selected = set().union(*greenhouse_result.selected_patterns.values())
    planted = {"set_temperature > advance_week > reset", "paint_pot > paint_pot > paint_pot",
               "advance_week > measure_height > pause:long"}
    assert selected & planted


def test_pause_edges_are_learned_on_training_events_only(greenhouse_data, greenhouse_result):
    ev, _ = greenhouse_data
    r = greenhouse_result
    all_edges = Encoder().fit(ev).encoding_["pause"]["edges"]
    differ = 0
    for (rep, k), part in r.folds.groupby(["repeat", "fold"]):
        train = ev[~ev["learner"].isin(set(part["learner"]))]
        edges = Encoder().fit(train).encoding_["pause"]["edges"]
        assert r.encodings[(rep, k)]["pause"]["edges"] == edges
        differ += edges != all_edges
    assert differ > 0


@pytest.fixture(scope="module")
def small_files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("gh")
    return write_greenhouse(folder, 30, random_state=3)


def _cli(paths, out, *extra):
    return main(["validate", str(paths["events"]), "--outcomes", str(paths["outcomes"]),
                 "--out", str(out), "--quiet", "--splits", "3", "--fractions", "0.5,1",
                 "--bootstrap", "50", "--hmm-states", "2", "--repeats", "2", *extra])


def test_cli_writes_the_tables(small_files, tmp_path):
    assert _cli(small_files, tmp_path / "a") == 0
    t = pd.read_csv(tmp_path / "a" / "early_prediction.csv")
    assert set(t["classifier"]) == {"pattern", "hmm", "frequency_pause", "fusion", "majority"}
    assert sorted(set(t["fraction"])) == [0.5, 1.0]
    assert (t["n_learners"] == 30).all()
    n_rep = t.groupby("classifier")["n_repeats"].first().to_dict()
    assert n_rep == {"pattern": 2, "frequency_pause": 2, "majority": 2, "hmm": 1, "fusion": 1}
    for name in ["early_prediction_long.csv", "validation_predictions.csv",
                 "validation_folds.json"]:
        assert (tmp_path / "a" / name).is_file()


@pytest.mark.parametrize("extra, msg", [
    (("--fractions", "0.5,1.2"), r"Cut fraction 1\.2 is outside \(0, 1\]"),
    (("--fractions", "a,b"), r"--fractions: expected comma-separated numbers"),
    (("--splits", "40"), r"There are 30 learners but 40 folds"),
    (("--classifiers", "pattern,svm"), r"--classifiers: unknown name 'svm'"),
    (("--jobs", "0"), r"'n_jobs' parameter of validate must be a positive int or -1"),
])
def test_cli_bad_options_exit_2_with_one_line(small_files, tmp_path, capsys, extra, msg):
    code = _cli(small_files, tmp_path / "x", *extra)
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    assert re.search(msg, err), err


def test_cli_folds_and_loo_are_exclusive(small_files, tmp_path, capsys):
    assert _cli(small_files, tmp_path / "x", "--loo") == 2
    assert "not allowed with argument" in capsys.readouterr().err


def test_hmm_featurizer_uses_the_phase_models():
    ev, oc = _greenhouse(30, seed=2)
    g = Grouping().fit(oc)
    enc = Encoder().fit(ev)
    labels = pd.Series(g.transform(oc).to_numpy(), index=oc["learner"])
    db = enc.transform(ev, groups=labels.to_dict(), group_names=g.group_names_)
    f = HMMLikelihoodFeaturizer(n_states=2, n_restarts=1, n_iter=10).fit(db, None)
    assert isinstance(f.models_, GroupHMMClassifier)
    ll = f.models_.log_likelihoods(db)
    np.testing.assert_allclose(f.transform(db)[:, 0],
                               (ll[:, 1] - ll[:, 0]) / np.maximum(db.lengths, 1))


@pytest.mark.slow
def test_greenhouse_with_shuffled_gains_gives_no_classifier_an_edge():
    # Gains shuffled across learners -> no true signal. Tolerance (stated before
    # looking): over 4 seeds x 4 classifiers x 2 fractions = 32 one-sided tests at
    # alpha = 0.05, at most 3 rejections; mean accuracy gap to the baseline < 0.1.
    rejections, gaps = 0, []
    for seed in range(4):
        ev, oc = _greenhouse(60, seed=200 + seed)
        rng = np.random.default_rng(seed)
        oc = oc.assign(gain=rng.permutation(oc["gain"].to_numpy()))
        r = validate(ev, oc, n_splits=3, n_repeats=1, fractions=[0.5, 1.0], n_bootstrap=50,
                     random_state=seed,
                     grouping=Grouping(), encoder=Encoder(),
                     featurizers=default_featurizers(random_state=seed, hmm_params=FAST_HMM))
        t = r.to_frame()
        models = t[t.classifier != "majority"]
        rejections += int(models["beats_baseline"].sum())
        gaps.append(models.groupby("classifier")["accuracy"].mean()
                    - models.groupby("classifier")["baseline_accuracy"].mean())
    assert rejections <= 3
    assert (pd.concat(gaps, axis=1).mean(axis=1) < 0.1).all()


def test_several_sessions_per_learner_stay_in_one_fold_and_are_pooled():
    d = generate_greenhouse(45, random_state=11, sessions=True)
    ev = d.events.assign(time=parse_times(d.events["time"])[0])
    oc = d.outcomes.assign(gain=normalized_gain(d.outcomes["pre"], d.outcomes["post"],
                                                d.outcomes["max"]))
    enc = Encoder(unit="session")
    db = enc.fit(ev).transform(ev)
    multi = pd.Series(db.learners).value_counts()
    assert (multi > 1).any()  # some learners have two sessions
    # the pattern featurizer's tests merge a learner's sessions (learner unit), so no
    # warning about sessions treated as independent units is raised (warnings are errors)
    r = validate(ev, oc, n_splits=3, n_repeats=1, fractions=[0.5, 1.0], n_bootstrap=50,
                 grouping=Grouping(), encoder=enc,
                 featurizers=default_featurizers(hmm_params=FAST_HMM))
    p = r.predictions
    # one prediction per learner (sessions pooled), every learner held out once
    assert not p.duplicated(["classifier", "fraction", "learner"]).any()
    assert r.folds["learner"].is_unique
    assert set(p["learner"]) <= set(multi.index)
