"""Early-prediction metrics, the baseline test and the learner fold splitter."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import (
    accuracy_score,
    balanced_accuracy_score,
    recall_score,
    roc_auc_score,
)
from statsmodels.stats.contingency_tables import mcnemar

from seqmine.errors import ParameterError
from seqmine.validation.crossval import early_prediction_table, learner_splits
from seqmine.validation.metrics import _bootstrap_weights, _metrics, _weighted_auc

GROUPS = ["strong", "weak"]


def _predictions(seed, n=40, k=2, names=GROUPS):
    """Random predictions table for two classifiers plus the majority baseline."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, k, n)
    rows = []
    for name in ["model", "noisy", "majority"]:
        for frac in [0.5, 1.0]:
            if name == "majority":
                proba = np.zeros((n, k))
                proba[:, 0] = 1.0
            else:
                logits = rng.normal(size=(n, k))
                logits[np.arange(n), y] += 1.0 if name == "model" else 0.0
                # round to create ties in the scores, as real probabilities have
                proba = np.round(np.exp(logits) / np.exp(logits).sum(1, keepdims=True), 2)
                proba /= proba.sum(1, keepdims=True)
            pred = proba.argmax(1)
            frame = {"learner": [f"L{i:02d}" for i in range(n)], "group": [names[i] for i in y],
                     "classifier": name, "fraction": frac, "predicted": [names[i] for i in pred]}
            for g in range(k):
                frame[f"proba_{names[g]}"] = proba[:, g]
            rows.append(pd.DataFrame(frame))
    return pd.concat(rows, ignore_index=True)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_point_metrics_equal_scikit_learn(seed):
    # reference: scikit-learn's own metric implementations
    preds = _predictions(seed)
    table = early_prediction_table(preds, GROUPS, n_bootstrap=50, random_state=seed)
    for (name, frac), part in preds.groupby(["classifier", "fraction"]):
        row = table[(table.classifier == name) & (table.fraction == frac)].iloc[0]
        y, p = part["group"], part["predicted"]
        assert row["accuracy"] == pytest.approx(accuracy_score(y, p), abs=1e-12)
        assert row["balanced_accuracy"] == pytest.approx(balanced_accuracy_score(y, p), abs=1e-12)
        for g in GROUPS:
            assert row[f"recall_{g}"] == pytest.approx(
                recall_score(y, p, labels=[g], average="macro"), abs=1e-12)
        auc = roc_auc_score(y == "weak", part["proba_weak"])
        assert row["roc_auc"] == pytest.approx(auc, abs=1e-12)
        assert row["n_learners"] == len(part)


def test_bootstrap_replicates_equal_scikit_learn():
    # each bootstrap replicate computed by weights must equal sklearn on the resampled rows
    rng = np.random.default_rng(5)
    n = 30
    y = rng.integers(0, 3, n)
    proba = rng.dirichlet([1, 1, 1], size=n).round(2)
    proba /= proba.sum(1, keepdims=True)
    pred = proba.argmax(1)
    boot = rng.integers(0, n, size=(25, n))
    got = _metrics(y, pred, proba, _bootstrap_weights(boot, n), 3)
    for b in range(25):
        idx = boot[b]
        yb, pb = y[idx], pred[idx]
        assert got["accuracy"][b] == pytest.approx(accuracy_score(yb, pb), abs=1e-12)
        present = np.unique(yb)
        for g in range(3):
            if g in present:
                assert got[f"recall_{g}"][b] == pytest.approx(
                    recall_score(yb, pb, labels=[g], average="macro"), abs=1e-12)
            else:
                assert np.isnan(got[f"recall_{g}"][b])
        if len(present) == 3:
            assert got["balanced_accuracy"][b] == pytest.approx(
                balanced_accuracy_score(yb, pb), abs=1e-12)
            assert got["roc_auc"][b] == pytest.approx(
                roc_auc_score(yb, proba[idx], multi_class="ovr", average="macro"), abs=1e-12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.integers(0, 5), st.integers(0, 3)),
                min_size=2, max_size=25))
def test_weighted_auc_equals_roc_auc_score_on_expanded_data(rows):
    # integer weights = repeated rows; sklearn on the expanded data is the reference
    pos = np.array([r[0] for r in rows])
    score = np.array([r[1] for r in rows], dtype=float)
    w = np.array([r[2] for r in rows], dtype=float)
    got = _weighted_auc(pos, score, w[None, :])[0]
    rep = np.repeat(np.arange(len(rows)), w.astype(int))
    if len(rep) == 0 or len(np.unique(pos[rep])) < 2:
        assert np.isnan(got)
    else:
        assert got == pytest.approx(roc_auc_score(pos[rep], score[rep]), abs=1e-12)


def test_baseline_test_is_one_sided_exact_mcnemar():
    preds = _predictions(3, n=60)
    table = early_prediction_table(preds, GROUPS, n_bootstrap=20)
    row = table[(table.classifier == "model") & (table.fraction == 1.0)].iloc[0]
    b, c = row["n_classifier_better"], row["n_baseline_better"]
    # reference: statsmodels' exact McNemar test is two-sided, 2 * min tail
    ref = mcnemar([[0, b], [c, 0]], exact=True).pvalue
    if b > c:
        assert row["p_value"] == pytest.approx(ref / 2, rel=1e-9)
    assert row["beats_baseline"] == (row["p_value"] < 0.05)
    assert not table.loc[table.classifier == "majority", "beats_baseline"].any()


def _repeated(seed, n_repeats, n=40):
    """Predictions of several repetitions (each from its own random table)."""
    parts = [_predictions(seed + r, n=n).assign(repeat=r) for r in range(n_repeats)]
    y = parts[0]["group"].to_numpy()
    for p in parts:  # the groups are fixed once: the same truth in every repetition
        p["group"] = y
    return pd.concat(parts, ignore_index=True)


def test_repeated_metrics_are_means_over_repetitions_with_their_range():
    # reference: scikit-learn on each repetition separately, then mean / min / max
    preds = _repeated(11, 3)
    table = early_prediction_table(preds, GROUPS, n_bootstrap=50, random_state=1)
    for (name, frac), part in preds.groupby(["classifier", "fraction"]):
        row = table[(table.classifier == name) & (table.fraction == frac)].iloc[0]
        per = [balanced_accuracy_score(r["group"], r["predicted"])
               for _, r in part.groupby("repeat")]
        assert row["n_repeats"] == 3
        assert row["balanced_accuracy"] == pytest.approx(np.mean(per), abs=1e-12)
        assert row["balanced_accuracy_min"] == pytest.approx(min(per), abs=1e-12)
        assert row["balanced_accuracy_max"] == pytest.approx(max(per), abs=1e-12)
        aucs = [roc_auc_score(r["group"] == "weak", r["proba_weak"])
                for _, r in part.groupby("repeat")]
        assert row["roc_auc"] == pytest.approx(np.mean(aucs), abs=1e-12)


def test_repeated_baseline_test_is_a_sign_test_on_per_learner_shares():
    # reference: scipy's binomial test on the signs of the paired share differences
    # (the sign test, Dixon & Mood 1946), counted by hand here
    from scipy.stats import binomtest

    preds = _repeated(21, 4, n=60)
    table = early_prediction_table(preds, GROUPS, n_bootstrap=20)
    for name in ["model", "noisy"]:
        part = preds[(preds.classifier == name) & (preds.fraction == 1.0)]
        base = preds[(preds.classifier == "majority") & (preds.fraction == 1.0)]
        share = (part["predicted"] == part["group"]).groupby(part["learner"]).mean()
        share_b = (base["predicted"] == base["group"]).groupby(base["learner"]).mean()
        d = share - share_b
        b, c = int((d > 0).sum()), int((d < 0).sum())
        row = table[(table.classifier == name) & (table.fraction == 1.0)].iloc[0]
        assert (row["n_classifier_better"], row["n_baseline_better"]) == (b, c)
        assert row["p_value"] == pytest.approx(
            binomtest(b, b + c, 0.5, alternative="greater").pvalue, rel=1e-12)


def test_a_classifier_with_fewer_repetitions_is_compared_on_its_own():
    preds = _repeated(31, 3)
    short = preds[~((preds.classifier == "noisy") & (preds.repeat > 0))]
    table = early_prediction_table(short, GROUPS, n_bootstrap=20)
    one = early_prediction_table(short[short.repeat == 0], GROUPS, n_bootstrap=20)
    cols = ["accuracy", "p_value", "baseline_accuracy", "n_classifier_better"]
    a = table[table.classifier == "noisy"][cols].reset_index(drop=True)
    b = one[one.classifier == "noisy"][cols].reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)
    assert set(table.loc[table.classifier == "noisy", "n_repeats"]) == {1}
    assert set(table.loc[table.classifier == "model", "n_repeats"]) == {3}
    with pytest.raises(ParameterError, match=r"lack the 'majority' baseline in repetition"):
        early_prediction_table(preds[~((preds.classifier == "majority") & (preds.repeat == 2))],
                               GROUPS)


def test_bootstrap_is_seeded_and_intervals_bracket_the_estimate():
    preds = _predictions(4)
    t1 = early_prediction_table(preds, GROUPS, n_bootstrap=200, random_state=9)
    t2 = early_prediction_table(preds, GROUPS, n_bootstrap=200, random_state=9)
    pd.testing.assert_frame_equal(t1, t2)
    for m in ["accuracy", "balanced_accuracy", "roc_auc"]:
        assert (t1[f"{m}_low"] <= t1[m] + 1e-12).all()
        assert (t1[f"{m}_high"] >= t1[m] - 1e-12).all()
    t3 = early_prediction_table(preds, GROUPS, n_bootstrap=200, random_state=10)
    assert not np.allclose(t1["accuracy_low"], t3["accuracy_low"])


def test_table_needs_majority_and_same_learners():
    preds = _predictions(0)
    with pytest.raises(ParameterError, match="'majority' classifier"):
        early_prediction_table(preds[preds.classifier != "majority"], GROUPS)
    bad = preds.drop(index=preds.index[(preds.classifier == "noisy")][:1])
    with pytest.raises(ParameterError, match="covers other learners"):
        early_prediction_table(bad, GROUPS)


# ------------------------------------------------------------------ fold splitter
@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 4), st.booleans()), min_size=6, max_size=40),
       st.integers(2, 4), st.integers(0, 3))
def test_no_learner_spans_two_folds(spec, folds, seed):
    learners, labels = [], []
    for i, (n_sessions, weak) in enumerate(spec):
        learners += [f"L{i}"] * n_sessions
        labels += ["weak" if weak else "strong"] * n_sessions
    learners, labels = np.array(learners), np.array(labels)
    per_group = pd.Series([w for _, w in spec]).value_counts()
    if len(per_group) < 2 or per_group.min() < folds:
        with pytest.raises(ParameterError, match="folds|at least two groups"):
            learner_splits(learners, labels, n_splits=folds, random_state=seed)
        return
    split = learner_splits(learners, labels, n_splits=folds, random_state=seed)
    assert len(split) == folds
    seen = np.zeros(len(learners), dtype=int)
    for tr, te in split:
        assert set(learners[tr]).isdisjoint(learners[te])
        assert len(tr) + len(te) == len(learners)
        seen[te] += 1
        # stratified: each fold holds each group's learners within one of its share
        for g, n_g in per_group.items():
            got = len(set(learners[te][labels[te] == ("weak" if g else "strong")]))
            assert abs(got - n_g / folds) < 1 + 1e-9
    assert (seen == 1).all()


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(1, 4), min_size=2, max_size=30), st.integers(2, 5),
       st.integers(0, 3))
def test_unstratified_folds_keep_learners_together(sessions, folds, seed):
    # Without labels (held-out scoring of phase models): learners dealt into folds of
    # sizes that differ by at most one learner.
    learners = np.array([f"L{i}" for i, k in enumerate(sessions) for _ in range(k)])
    if len(sessions) < folds:
        with pytest.raises(ParameterError, match=f"{len(sessions)} learners but {folds} folds"):
            learner_splits(learners, n_splits=folds, random_state=seed)
        return
    split = learner_splits(learners, n_splits=folds, random_state=seed)
    assert len(split) == folds
    seen = np.zeros(len(learners), dtype=int)
    sizes = []
    for tr, te in split:
        assert set(learners[tr]).isdisjoint(learners[te])
        seen[te] += 1
        sizes.append(len(set(learners[te])))
    assert (seen == 1).all() and max(sizes) - min(sizes) <= 1
    assert [te.tolist() for _, te in split] == [
        te.tolist() for _, te in learner_splits(learners, n_splits=folds, random_state=seed)]


def test_leave_one_learner_out_keeps_sessions_together():
    learners = ["a", "a", "b", "c", "c", "c"]
    split = learner_splits(learners, ["x", "x", "y", "x", "x", "x"], loo=True)
    assert [te.tolist() for _, te in split] == [[0, 1], [2], [3, 4, 5]]


@pytest.mark.parametrize("learners, labels, kw, msg", [
    (["a", "b", "c"], ["x", "y", "x"], {"n_splits": 5}, r"3 learners but 5 folds"),
    (["a", "b", "c", "d"], ["x", "x", "x", "x"], {"n_splits": 2}, r"group 'x'; cross-validation"),
    (["a", "b", "c", "d", "e", "f"], ["x", "x", "x", "x", "x", "y"], {"n_splits": 3},
     r"Group 'y' has 1 learners, fewer than the 3 folds"),
    (["a", "b"], ["x", "y"], {"n_splits": 1}, r"'n_splits' parameter of learner_splits must be an int >= 2"),
    (["a"], ["x"], {"loo": True}, r"at least 2 learners"),
])
def test_fold_errors(learners, labels, kw, msg):
    with pytest.raises(ParameterError, match=msg):
        learner_splits(learners, labels, **kw)
