"""Phase-model layer: published worked HMM examples, brute force, BIC, JSON, graphs."""

import itertools
import json
import math

import networkx as nx
import numpy as np
import pytest
from hmmlearn.hmm import CategoricalHMM
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import DataFileError, ParameterError
from seqmine.phases import PhaseModel, _hmm, fit_phase_model, name_state

# --------------------------------------------------------------------------------------
# Ice-cream example, Jurafsky & Martin, Speech and Language Processing, 3rd ed. draft,
# Appendix A "Hidden Markov Models" (parameters as transcribed in public code; the book
# itself was not read, so treat them as from memory). The probabilities below were
# recomputed by enumerating every state path (see _brute_force).
# States H=0, C=1; observations "1","2","3" -> ids 0,1,2.
ICE_PI = [0.8, 0.2]
ICE_A = [[0.6, 0.4], [0.5, 0.5]]
ICE_B = [[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]]
ICE_313 = [2, 0, 2]


def ice_cream(transmat=ICE_A):
    return PhaseModel.from_parameters(ICE_PI, transmat, ICE_B, ["1", "2", "3"])


def test_ice_cream_forward_probability_jm3():
    m = ice_cream()
    # forward alpha sums per prefix: alpha1 = (.32, .02), alpha2 = (.0404, .069),
    # alpha3 = (.023496, .005066); P(3 1 3) = 0.028562 (J&M 3rd ed. draft, App. A)
    prefixes = [[2], [2, 0], [2, 0, 2]]
    probs = np.exp(m.score_tokens(prefixes))
    np.testing.assert_allclose(probs, [0.32 + 0.02, 0.0404 + 0.069, 0.023496 + 0.005066],
                               rtol=1e-10)
    assert math.isclose(math.exp(m.score([ICE_313])), 0.028562, rel_tol=1e-9)


def test_ice_cream_viterbi_jm3():
    # Viterbi best path H C H with probability 0.0128 (J&M 3rd ed. draft, App. A)
    logprob, states = ice_cream().decode([ICE_313])
    assert states.tolist() == [0, 1, 0]
    assert math.isclose(math.exp(logprob), 0.0128, rel_tol=1e-9)


def test_ice_cream_second_edition():
    # Jurafsky & Martin, Speech and Language Processing, 2nd ed. (2009), the HMM chapter:
    # transitions A = [[.7, .3], [.4, .6]] (from memory). P(3 1 3) = 0.026264 and
    # Viterbi H H H with 0.012544, computed by enumerating the 8 state paths.
    m = ice_cream([[0.7, 0.3], [0.4, 0.6]])
    assert math.isclose(math.exp(m.score([ICE_313])), 0.026264, rel_tol=1e-9)
    logprob, states = m.decode([ICE_313])
    assert states.tolist() == [0, 0, 0]
    assert math.isclose(math.exp(logprob), 0.012544, rel_tol=1e-9)


def test_wikipedia_rainy_sunny_viterbi():
    # Rainy/Sunny example of the English Wikipedia article "Viterbi algorithm" (older
    # revisions; from memory): Rainy=0, Sunny=1; walk=0, shop=1, clean=2. Forward
    # 0.033612 (computed by path enumeration); Viterbi S R R with 0.01344, the value
    # hmmlearn's own test suite asserts for this model.
    m = PhaseModel.from_parameters([0.6, 0.4], [[0.7, 0.3], [0.4, 0.6]],
                                   [[0.1, 0.4, 0.5], [0.6, 0.3, 0.1]], ["walk", "shop", "clean"])
    assert math.isclose(math.exp(m.score([[0, 1, 2]])), 0.033612, rel_tol=1e-9)
    logprob, states = m.decode([[0, 1, 2]])
    assert states.tolist() == [1, 0, 0]
    assert math.isclose(math.exp(logprob), 0.01344, rel_tol=1e-9)


def test_stamp_revealing_introduction():
    # Stamp (2004), "A Revealing Introduction to Hidden Markov Models", San Jose State
    # University, the temperature / tree-ring example (values from memory; recomputed by
    # enumerating the 16 state paths): P(O) = 0.0096296, Viterbi (1, 1, 1, 0), 0.0028224
    m = PhaseModel.from_parameters([0.6, 0.4], [[0.7, 0.3], [0.4, 0.6]],
                                   [[0.1, 0.4, 0.5], [0.7, 0.2, 0.1]])
    assert math.isclose(math.exp(m.score([[0, 1, 0, 2]])), 0.0096296, rel_tol=1e-4)
    logprob, states = m.decode([[0, 1, 0, 2]])
    assert states.tolist() == [1, 1, 1, 0]
    assert math.isclose(math.exp(logprob), 0.0028224, rel_tol=1e-9)


def test_bic_ice_cream_check_value_and_hmmlearn():
    m = ice_cream()
    # BIC = -2 log L + k ln n (Schwarz 1978), k = (N-1) + N(N-1) + N(M-1) = 7 for N=2,
    # M=3; on "3 1 3": log L = ln 0.028562 = -3.555678 (the J&M forward value above) and
    # BIC = 7.111356 + 7 ln 3 = 14.801642 (computed by hand)
    assert m.n_free_parameters == 7
    assert math.isclose(m.score([ICE_313]), -3.555678, abs_tol=1e-6)
    assert math.isclose(m.bic([ICE_313]), 14.801642, abs_tol=1e-6)
    # reference library: hmmlearn's own bic on the same model
    ref = CategoricalHMM(n_components=2, n_features=3, init_params="", params="")
    ref.startprob_, ref.transmat_, ref.emissionprob_ = (np.array(ICE_PI), np.array(ICE_A),
                                                        np.array(ICE_B))
    assert math.isclose(m.bic([ICE_313]), ref.bic(np.array(ICE_313).reshape(-1, 1)),
                        rel_tol=1e-12)


@pytest.mark.parametrize("n, m, k", [(2, 3, 7), (3, 4, 17), (1, 5, 4), (4, 2, 19)])
def test_free_parameter_count(n, m, k):
    # Free parameters of a categorical HMM: start (N-1) + transitions N(N-1) + emissions
    # N(M-1), the count hmmlearn's CategoricalHMM uses for its bic (computed by hand)
    assert _hmm.n_free_parameters(n, m) == k


# ------------------------------------------------------------------ brute force
def _brute_force(pi, A, B, seq):
    """Sum and max over all state paths of P(O, path) (enumeration)."""
    total, best, best_path = 0.0, -1.0, None
    for path in itertools.product(range(len(pi)), repeat=len(seq)):
        p = pi[path[0]] * B[path[0], seq[0]]
        for t in range(1, len(seq)):
            p *= A[path[t - 1], path[t]] * B[path[t], seq[t]]
        total += p
        if p > best:
            best, best_path = p, path
    return total, best, best_path


@st.composite
def small_models(draw):
    n = draw(st.integers(1, 3))
    m = draw(st.integers(1, 3))
    weights = st.floats(0.05, 1.0)

    def stochastic(rows, cols):
        w = np.array([[draw(weights) for _ in range(cols)] for _ in range(rows)])
        return w / w.sum(axis=1, keepdims=True)

    pi = stochastic(1, n)[0]
    A = stochastic(n, n)
    B = stochastic(n, m)
    seqs = draw(st.lists(st.lists(st.integers(0, m - 1), min_size=1, max_size=5),
                         min_size=1, max_size=3))
    return pi, A, B, seqs


@settings(max_examples=60, deadline=None)
@given(small_models())
def test_loglik_equals_brute_force_enumeration(case):
    pi, A, B, seqs = case
    model = PhaseModel.from_parameters(pi, A, B)
    ours = model.score_tokens(seqs)
    expected = [math.log(_brute_force(pi, A, B, s)[0]) for s in seqs]
    np.testing.assert_allclose(ours, expected, rtol=1e-10, atol=1e-12)
    # and hmmlearn's score of the same model agrees (reference library)
    X = np.concatenate([np.asarray(s) for s in seqs])
    lengths = [len(s) for s in seqs]
    ref = _hmm._hmm_from(pi, A, B).score(X.reshape(-1, 1), lengths)
    assert math.isclose(model.score(X, lengths), ref, rel_tol=1e-10, abs_tol=1e-12)


@settings(max_examples=40, deadline=None)
@given(small_models())
def test_viterbi_equals_brute_force_maximum(case):
    pi, A, B, seqs = case
    model = PhaseModel.from_parameters(pi, A, B)
    for s in seqs:
        logprob, states = model.decode([s])
        _, best, _ = _brute_force(pi, A, B, s)
        assert math.isclose(logprob, math.log(best), rel_tol=1e-9, abs_tol=1e-12)
        # the returned path attains the maximum (ties may pick another optimal path)
        p = pi[states[0]] * B[states[0], s[0]]
        for t in range(1, len(s)):
            p *= A[states[t - 1], states[t]] * B[states[t], s[t]]
        assert math.isclose(math.log(p), math.log(best), rel_tol=1e-9, abs_tol=1e-12)


def test_empty_and_impossible_sequences():
    m = PhaseModel.from_parameters([1.0, 0.0], [[1.0, 0.0], [0.0, 1.0]], [[1.0, 0.0], [0.0, 1.0]])
    ll = m.score_tokens([[], [0, 0], [0, 1]])
    assert ll[0] == 0.0 and ll[1] == 0.0 and ll[2] == -np.inf


def test_sampling_matches_model_frequencies():
    # 1-state model: tokens are i.i.d. draws from the emission row
    m = PhaseModel.from_parameters([1.0], [[1.0]], [[0.2, 0.5, 0.3]])
    X, S = m.sample([1000] * 20, random_state=3)
    freq = np.bincount(X, minlength=3) / len(X)
    np.testing.assert_allclose(freq, [0.2, 0.5, 0.3], atol=0.015)
    assert set(S.tolist()) == {0}
    X2, _ = m.sample([1000] * 20, random_state=3)
    assert np.array_equal(X, X2)


def test_sampled_transitions_follow_matrix():
    A = np.array([[0.9, 0.1], [0.3, 0.7]])
    m = PhaseModel.from_parameters([0.5, 0.5], A, [[0.5, 0.5], [0.5, 0.5]])
    _, S = m.sample([20000], random_state=1)
    counts = np.zeros((2, 2))
    np.add.at(counts, (S[:-1], S[1:]), 1)
    np.testing.assert_allclose(counts / counts.sum(axis=1, keepdims=True), A, atol=0.02)


# ----------------------------------------------------------------- description
def test_state_names_dwell_and_graph(tmp_path):
    m = PhaseModel.from_parameters(
        [0.5, 0.5], [[0.75, 0.25], [0.02, 0.98]],
        [[0.45, 0.45, 0.1], [0.05, 0.05, 0.9]], ["measure_height", "pause:long", "paint_pot"])
    assert m.state_names == ["measure_height + pause:long", "paint_pot"]
    # expected stay in a state, 1 / (1 - a_ii) (geometric durations; Rabiner 1989,
    # Proc. IEEE 77(2), section II, from memory): 1/0.25 = 4 and 1/0.02 = 50
    np.testing.assert_allclose(m.dwell_times, [4.0, 50.0])
    desc = m.describe_states()
    assert desc["top_tokens"].iloc[1] == "paint_pot 0.900; measure_height 0.050; pause:long 0.050"
    g = m.to_graph(threshold=0.05)
    assert set(g.edges) == {("S1", "S1"), ("S1", "S2"), ("S2", "S2")}
    assert g.nodes["S2"]["name"] == "paint_pot"
    path = m.write_graphml(tmp_path / "g.graphml")
    back = nx.read_graphml(path)
    assert math.isclose(back.edges["S1", "S2"]["probability"], 0.25)
    assert back.nodes["S1"]["dwell"] == 4.0


def test_name_state_mass_rule():
    assert name_state([0.6, 0.3, 0.1], ["a", "b", "c"]) == "a"
    assert name_state([0.3, 0.3, 0.4], ["a", "b", "c"], max_tokens=3) == "c + a"


# -------------------------------------------------------------------- storage
def test_json_round_trip(tmp_path):
    db = SequenceDB.from_lists([["set_light", "advance_week", "measure_height", "pause:long"],
                                ["paint_pot", "paint_pot", "reset"]] * 8,
                               pause_tokens=["pause:long"])
    m = fit_phase_model(db, n_states=2, n_restarts=2, random_state=4, label="pooled")
    path = m.save(tmp_path / "m.json")
    back = PhaseModel.load(path)
    assert back.equals(m)
    assert back.info["restart_logliks"] == m.info["restart_logliks"]
    np.testing.assert_array_equal(back.info["occupancy"], m.info["occupancy"])
    assert back.score(db) == m.score(db)
    data = json.loads(path.read_text())
    assert data["format"] == "seqmine-phase-model" and isinstance(data["transmat"], list)


def test_json_bad_files(tmp_path):
    p = tmp_path / "bad.json"
    p.write_text("{not json")
    with pytest.raises(DataFileError, match="unreadable JSON"):
        PhaseModel.load(p)
    p.write_text('{"format": "other"}')
    with pytest.raises(DataFileError, match="not a seqmine phase model"):
        PhaseModel.load(p)
    p.write_text('{"format": "seqmine-phase-model", "version": 99}')
    with pytest.raises(DataFileError, match="version 99 is not supported"):
        PhaseModel.load(p)
    with pytest.raises(DataFileError, match="no such phase model file"):
        PhaseModel.load(tmp_path / "missing.json")


def test_model_parameter_errors():
    with pytest.raises(ParameterError, match="shapes disagree"):
        PhaseModel.from_parameters([0.5, 0.5], [[1.0]], [[1.0]])
    with pytest.raises(ParameterError, match="summing to 1"):
        PhaseModel.from_parameters([0.5, 0.6], [[1, 0], [0, 1]], [[1.0], [1.0]])
    m = ice_cream()
    with pytest.raises(ParameterError, match="Largest token id is 5 but the model only emits"):
        m.score([[0, 5]])
    with pytest.raises(ParameterError, match="lengths sum to 4 but there are 3 tokens"):
        m.score(np.array([0, 1, 2]), [4])
    db = SequenceDB.from_lists([["x", "y"]])
    with pytest.raises(ParameterError, match="vocabulary .* differs"):
        m.score(db)


def test_lean_estep_equals_stock_hmmlearn():
    # our E-step shortcut must give the same Baum-Welch fit as hmmlearn itself
    gen = PhaseModel.from_parameters([0.5, 0.3, 0.2], [[0.8, 0.1, 0.1], [0.2, 0.7, 0.1],
                                                       [0.1, 0.3, 0.6]],
                                     [[0.6, 0.2, 0.1, 0.1], [0.1, 0.6, 0.2, 0.1],
                                      [0.1, 0.1, 0.2, 0.6]])
    lengths = np.array([1, 7, 30, 12, 2, 25] * 5)
    X, _ = gen.sample(lengths, random_state=5)
    start = _hmm.start_point(X, 3, 4, seed=2)
    fits = []
    for cls in (CategoricalHMM, _hmm._LeanCategoricalHMM):
        h = cls(n_components=3, n_features=4, init_params="", params="ste", n_iter=25,
                tol=-np.inf, implementation="scaling")
        h.startprob_, h.transmat_, h.emissionprob_ = (a.copy() for a in start)
        h.fit(X.reshape(-1, 1), lengths)
        fits.append(h)
    stock, lean = fits
    for name in ("startprob_", "transmat_", "emissionprob_"):
        np.testing.assert_allclose(getattr(lean, name), getattr(stock, name), rtol=1e-9,
                                   atol=1e-12)
    np.testing.assert_allclose(lean.monitor_.history, stock.monitor_.history, rtol=1e-12)


def test_plot_phase_model_draws_states_and_edges(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from seqmine.phases import plot_phase_model

    db = SequenceDB.from_lists([["set_light", "advance_week", "measure_height"],
                                ["paint_pot", "reset", "paint_pot"]] * 6)
    m = fit_phase_model(db, n_states=2, n_restarts=1, random_state=0, label="pooled")
    fig = plot_phase_model(m, threshold=0.01)
    texts = [t.get_text() for t in fig.axes[0].texts]
    assert any(t.startswith("S1\n" + m.state_names[0]) for t in texts)
    assert fig.axes[0].get_title() == "phase model: pooled"
    fig.savefig(tmp_path / "g.png")
    assert (tmp_path / "g.png").stat().st_size > 1000
    plt.close(fig)
