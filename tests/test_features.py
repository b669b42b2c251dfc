"""Featurizers: values against brute force / hmmlearn, the scikit-learn contract."""

import numpy as np
import pandas as pd
import pytest
from _validate_toys import count_contiguous, fisher_scorer, ngram_match, ngram_mine
from hmmlearn.hmm import CategoricalHMM
from sklearn.base import clone
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import NotFittedError, ParameterError
from seqmine.phases import GroupHMMClassifier
from seqmine.validation.features import (
    FrequencyPauseFeaturizer,
    HMMLikelihoodFeaturizer,
    PatternFeaturizer,
    group_codes,
    select_patterns,
)

TOY = dict(miner=ngram_mine, matcher=ngram_match, scorer=fisher_scorer, max_gap=0)


def _db(n=20, seed=0):
    """Group x does 'a b c' runs, group y 'c b a' runs, with noise tokens."""
    rng = np.random.default_rng(seed)
    seqs, groups = [], []
    for i in range(n):
        g = "x" if i % 2 == 0 else "y"
        s = []
        for _ in range(int(rng.integers(3, 7))):
            s += ["a", "b", "c"] if g == "x" else ["c", "b", "a"]
            s += list(rng.choice(["d", "e", "pause:long"], size=int(rng.integers(0, 3))))
        seqs.append(s)
        groups.append(g)
    db = SequenceDB.from_lists(seqs, groups=groups, pause_tokens=["pause:long"])
    db.times = np.cumsum(rng.exponential(5.0, size=db.n_tokens))
    return db, np.array(groups)


# ------------------------------------------------------------------ frequency/pause
def test_frequency_pause_values_against_per_sequence_brute_force():
    db, y = _db()
    f = FrequencyPauseFeaturizer().fit(db, y)
    X = f.transform(db)
    names = f.get_feature_names_out().tolist()
    assert X.shape == (db.n_sequences, len(names))
    for i in range(db.n_sequences):
        toks = db.decode(i)
        t = db.times[db.offsets[i]: db.offsets[i + 1]]
        acts = [(tok, tt) for tok, tt in zip(toks, t) if not tok.startswith("pause:")]
        for a in f.actions_:
            assert X[i, names.index(f"action:{a}")] == pytest.approx(
                sum(tok == a for tok, _ in acts) / len(acts))
        gaps = np.log1p(np.diff([tt for _, tt in acts]))
        assert X[i, names.index("pause_log_mean")] == pytest.approx(gaps.mean())
        assert X[i, names.index("pause_log_sd")] == pytest.approx(np.std(gaps))


def test_frequency_pause_unseen_actions_and_short_sequences():
    train = SequenceDB.from_lists([["a", "b", "a"], ["b", "b", "b"]])
    f = FrequencyPauseFeaturizer().fit(train)
    test = SequenceDB.from_lists([["z", "a"], ["a"], []])
    X = f.transform(test)
    names = f.get_feature_names_out().tolist()
    assert X[0, names.index("action:<other>")] == 0.5
    # one event: no gap -> training means; empty sequence: zero frequencies
    np.testing.assert_allclose(X[1, -2:], f.pause_fill_)
    assert X[2, :3].sum() == 0
    with pytest.raises(ParameterError, match="'log_offset' parameter"):
        FrequencyPauseFeaturizer(log_offset=0).fit(train)


# ------------------------------------------------------------------------ patterns
def test_pattern_featurizer_selects_the_ordering_and_counts_rates():
    db, y = _db()
    f = PatternFeaturizer(max_length=3, top_k=50, **TOY).fit(db, y)
    assert ("a", "b", "c") in f.patterns_ and ("c", "b", "a") in f.patterns_
    assert f.n_mined_ >= len(f.patterns_)
    X = f.transform(db)
    j = f.patterns_.index(("a", "b", "c"))
    ids = tuple(db.token_id(t) for t in ("a", "b", "c"))
    for i in range(db.n_sequences):
        expected = count_contiguous(db.sequence(i).tolist(), ids) * 100 / db.lengths[i]
        assert X[i, j] == pytest.approx(expected)
    counts = clone(f).set_params(value="count").fit(db, y).transform(db)
    assert counts[:, j].sum() == sum(
        count_contiguous(db.sequence(i).tolist(), ids) for i in range(db.n_sequences))


def test_pattern_featurizer_reads_held_out_data_by_token_name():
    db, y = _db()
    f = PatternFeaturizer(top_k=5, value="count", **TOY).fit(db, y)
    # same sequences, another vocabulary order plus an unseen token: same features
    seqs = [db.decode(i) for i in range(db.n_sequences)]
    other = SequenceDB.from_lists(seqs + [["new", "a"]], pause_tokens=["pause:long"],
                                  vocab=["new"] + sorted(db.vocab))
    X1, X2 = f.transform(db), f.transform(other)
    np.testing.assert_array_equal(X1, X2[:-1])
    # a held-out database lacking a token of a pattern counts that pattern zero
    partial = SequenceDB.from_lists([["a", "b", "a"]])
    assert f.transform(partial).shape == (1, len(f.patterns_))


def test_pattern_featurizer_without_significant_pattern_gives_one_zero_column():
    db, _ = _db()
    y = np.array(["x", "y"] * (db.n_sequences // 2))
    rng = np.random.default_rng(0)
    f = PatternFeaturizer(alpha=1e-12, **TOY).fit(db, rng.permutation(y))
    assert f.patterns_ == []
    assert f.get_feature_names_out().tolist() == ["no_pattern"]
    assert (f.transform(db) == 0).all()


def test_pattern_featurizer_in_a_pipeline_and_errors():
    db, y = _db()
    pipe = make_pipeline(PatternFeaturizer(top_k=4, **TOY), LogisticRegression())
    assert pipe.fit(db, y).score(db, y) == 1.0
    assert clone(pipe).get_params()["patternfeaturizer__top_k"] == 4
    with pytest.raises(NotFittedError, match="not fitted yet"):
        PatternFeaturizer().transform(db)
    with pytest.raises(ParameterError, match="expects X to be a SequenceDB"):
        PatternFeaturizer(**TOY).fit([[1, 2]], ["x"])
    with pytest.raises(ParameterError, match="'min_support' parameter of PatternFeaturizer"):
        PatternFeaturizer(min_support=0, **TOY).fit(db, y)
    with pytest.raises(ParameterError, match="one group only"):
        PatternFeaturizer(**TOY).fit(db, ["x"] * db.n_sequences)
    with pytest.raises(ParameterError, match="y has 3 labels but X has 20"):
        PatternFeaturizer(**TOY).fit(db, ["x", "y", "x"])


def test_select_patterns_orders_by_p_then_name():
    t = pd.DataFrame({"pattern": ["c", "b", "a", "d"], "p_value": [0.01, 0.001, 0.01, 0.5],
                      "q_value": [0.02, 0.004, 0.02, 0.5]})
    assert select_patterns(t, alpha=0.05, top_k=10) == ["b", "a", "c"]
    assert select_patterns(t, alpha=0.05, top_k=2) == ["b", "a"]
    assert select_patterns(t.iloc[:0], alpha=0.05, top_k=2) == []


def test_group_codes_keep_database_order():
    db = SequenceDB.from_lists([["a"], ["b"]], groups=["weak", "strong"],
                               group_names=["weak", "strong"])
    codes, names = group_codes(db, None)
    assert names == ["weak", "strong"] and codes.tolist() == [0, 1]
    codes, names = group_codes(db, ["strong", "weak"])
    assert names == ["weak", "strong"] and codes.tolist() == [1, 0]


# ---------------------------------------------------------------------------- HMM
def _as_hmmlearn(model):
    """The same categorical HMM as an hmmlearn model (reference library)."""
    ref = CategoricalHMM(n_components=model.n_states, n_features=len(model.vocab))
    ref.startprob_ = model.startprob
    ref.transmat_ = model.transmat
    ref.emissionprob_ = model.emissionprob
    return ref


def test_hmm_featurizer_llr_equals_hmmlearn_scores():
    db, y = _db(n=16)
    f = HMMLikelihoodFeaturizer(n_states=2, n_restarts=1, n_iter=10).fit(db, y)
    X = f.transform(db)
    assert X.shape == (db.n_sequences, 1)
    assert isinstance(f.models_, GroupHMMClassifier)
    # reference: hmmlearn's CategoricalHMM.score of each group's fitted parameters
    refs = [_as_hmmlearn(m) for m in f.models_.models_]
    for i in range(db.n_sequences):
        s = db.sequence(i).reshape(-1, 1).astype(int)
        ll = [ref.score(s) for ref in refs]
        assert X[i, 0] == pytest.approx((ll[1] - ll[0]) / len(s), rel=1e-9)
    # per-token ratio separates the groups on training data
    assert X[y == "y", 0].mean() > X[y == "x", 0].mean()
    assert f.get_feature_names_out().tolist() == ["hmm_llr_y_vs_x"]


def test_hmm_featurizer_unseen_tokens_and_empty_sequences():
    db, y = _db(n=12)
    f = HMMLikelihoodFeaturizer(n_states=2, n_restarts=1, n_iter=5).fit(db, y)
    other = SequenceDB.from_lists([["a", "b", "c"], ["zz", "a", "b", "c", "zz"], []],
                                  vocab=["zz", "a", "b", "c"])
    X = f.transform(other)
    assert X[0, 0] == pytest.approx(X[1, 0])
    assert X[2, 0] == 0.0
    assert np.isfinite(X).all()


def test_hmm_featurizer_is_deterministic_and_checks_params():
    db, y = _db(n=12)
    a = HMMLikelihoodFeaturizer(n_states=2, n_iter=5, random_state=3).fit(db, y)
    b = HMMLikelihoodFeaturizer(n_states=2, n_iter=5, random_state=3).fit(db, y)
    np.testing.assert_array_equal(a.transform(db), b.transform(db))
    with pytest.raises(ParameterError, match="'n_states' parameter of HMMLikelihoodFeaturizer"):
        HMMLikelihoodFeaturizer(n_states=0).fit(db, y)


def test_pattern_featurizer_with_the_real_stages_and_their_options():
    db, y = _db()
    f = PatternFeaturizer(min_support=0.1, max_length=3, min_length=2, start_with_action=True,
                          skip_pauses=False, correction="westfall-young", n_permutations=200,
                          top_k=50).fit(db, y)
    assert f.patterns_ and all(len(p) >= 2 and not p[0].startswith("pause:")
                               for p in f.patterns_)
    assert ("a", "b", "c") in f.patterns_
    # counts agree with the brute-force contiguous matcher used elsewhere in the tests
    toy = PatternFeaturizer(value="count", **TOY).fit(db, y)
    toy.patterns_ = list(f.patterns_)
    real = clone(f).set_params(value="count").fit(db, y)
    np.testing.assert_array_equal(real.transform(db), toy.transform(db))
