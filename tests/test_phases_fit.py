"""Fitting and comparing phase models: recovery, reproducibility, distance, bad input."""

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import entropy, mannwhitneyu
from statsmodels.stats.multitest import multipletests

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError, SeqmineWarning
from seqmine.phases import (
    PhaseModel,
    _hmm,
    align_states,
    compare_state_paths,
    fit_phase_model,
    fit_phases,
    load_phase_models,
    model_distance,
    path_measures,
    select_n_states,
)

VOCAB = ["set_light", "set_water", "advance_week", "measure_height", "paint_pot", "reset"]


def _generators():
    """Two invented 3-state generators: same emissions, cycles in opposite directions."""
    B = np.full((3, 6), 0.025)
    B[0, [0, 1]] = 0.45
    B[1, [2, 3]] = 0.45
    B[2, [4, 5]] = 0.45
    A_strong = np.array([[0.70, 0.27, 0.03], [0.03, 0.70, 0.27], [0.27, 0.03, 0.70]])
    A_weak = A_strong.T.copy()
    pi = np.full(3, 1 / 3)
    return (PhaseModel.from_parameters(pi, A_strong, B, VOCAB, label="strong"),
            PhaseModel.from_parameters(pi, A_weak, B, VOCAB, label="weak"))


def _sample_db(n=60, length=60, seed=1):
    gen_s, gen_w = _generators()
    seqs = []
    for k, gen in enumerate((gen_s, gen_w)):
        X, _ = gen.sample([length] * n, random_state=seed + k)
        seqs += [[VOCAB[t] for t in X[i * length:(i + 1) * length]] for i in range(n)]
    return SequenceDB.from_lists(seqs, groups=["strong"] * n + ["weak"] * n, vocab=VOCAB)


def _small_db():
    seqs = ([["set_light", "advance_week", "measure_height", "pause:long"]] * 5
            + [["paint_pot", "paint_pot", "reset", "set_light", "set_water"]] * 5)
    return SequenceDB.from_lists(seqs, groups=["strong"] * 5 + ["weak"] * 5,
                                 pause_tokens=["pause:long"])


# ------------------------------------------------------------------- recovery
@pytest.mark.slow
def test_recovery_of_two_generators():
    db = _sample_db()
    res = fit_phases(db, n_states="2-4", n_restarts=3, n_splits=0, n_permutations=4, random_state=0,
                     distance_tokens=5000)
    # 1. BIC picks the generators' state count
    assert res.n_states == 3
    assert res.selection.loc[res.selection["selected"], "n_states"].tolist() == [3]
    gens = dict(zip(["strong", "weak"], _generators()))
    mapping = {}
    for g, gen in gens.items():
        fitted = res.models[g]
        al = align_states(fitted, gen)
        idx_f = [fitted.state_labels.index(s) for s in al["state_a"]]
        idx_g = [gen.state_labels.index(s) for s in al["state_b"]]
        mapping[g] = dict(zip(idx_f, idx_g))
        # 2. emissions within 0.06 and transitions within 0.08 of the generator
        # (tolerances ours: ~1200 visits per state give standard errors near 0.015)
        err_b = np.abs(fitted.emissionprob[idx_f] - gen.emissionprob[idx_g]).max()
        err_a = np.abs(fitted.transmat[np.ix_(idx_f, idx_f)]
                       - gen.transmat[np.ix_(idx_g, idx_g)]).max()
        assert err_b < 0.06, (g, err_b)
        assert err_a < 0.08, (g, err_a)
    # 3. the side-by-side table shows the reversed cycle: generator differences are
    # +-0.24 off the diagonal and 0 on it
    tr = res.aligned_transitions
    gs, gw = gens["strong"], gens["weak"]
    ls, lw = res.models["strong"].state_labels, res.models["weak"].state_labels
    for row in tr.itertuples(index=False):
        i, j = mapping["strong"][ls.index(row.from_a)], mapping["strong"][ls.index(row.to_a)]
        k, m = mapping["weak"][lw.index(row.from_b)], mapping["weak"][lw.index(row.to_b)]
        assert (i, j) == (k, m)  # aligned states are the same generator states
        expected = gs.transmat[i, j] - gw.transmat[i, j]
        assert abs(row.difference - expected) < 0.1, row
    # 4. pooled Viterbi paths: every off-diagonal transition rate differs (BH q < 0.05)
    rates = res.path_comparison[res.path_comparison["measure"] == "transition_rate"]
    assert len(rates) == 6
    assert (rates["q_value"] < 0.05).all()
    assert set(rates["favours"]) == {"strong", "weak"}
    # 5. the model distance is clearly positive and its test statistic exceeds every
    # permutation value, so the p-value is the smallest possible, 1 / (1 + 4)
    d = res.distances.iloc[0]
    assert d["symmetric"] > 0.1 and d["test_statistic"] > 0.1
    assert d["test_statistic"] > d["permutation_max"]
    assert d["p_value"] == pytest.approx(1 / 5)


# --------------------------------------------------------------- reproducibility
def test_same_seed_same_result_and_different_seed_runs():
    db = _small_db()
    kw = dict(n_states="1-2", n_restarts=2, n_splits=2, n_permutations=2, distance_tokens=500)
    a = fit_phases(db, random_state=3, **kw)
    b = fit_phases(db, random_state=3, **kw)
    for k in a.models:
        assert a.models[k].equals(b.models[k])
    pd.testing.assert_frame_equal(a.selection, b.selection)
    pd.testing.assert_frame_equal(a.distances, b.distances)
    pd.testing.assert_frame_equal(a.path_comparison, b.path_comparison)
    assert a.state_db.equals(b.state_db)


def test_parallel_equals_serial():
    db = _sample_db(n=12, length=30)
    kw = dict(n_states=[2, 3], n_restarts=2, n_splits=2, random_state=5, learners=db.learners)
    t1, m1 = select_n_states(db, n_jobs=1, **kw)
    t2, m2 = select_n_states(db, n_jobs=2, **kw)
    pd.testing.assert_frame_equal(t1, t2)
    for n in m1:
        assert m1[n].equals(m2[n])
    f1 = fit_phase_model(db, n_states=2, n_restarts=3, random_state=2, n_jobs=1)
    f2 = fit_phase_model(db, n_states=2, n_restarts=3, random_state=2, n_jobs=2)
    assert f1.equals(f2)


def test_restarts_pick_best_loglik():
    db = _sample_db(n=10, length=30)
    m = fit_phase_model(db, n_states=3, n_restarts=4, random_state=0)
    lls = m.info["restart_logliks"]
    assert len(lls) == 4 and m.log_likelihood == max(lls)
    assert m.info["best_restart"] == int(np.argmax(lls))
    # the reported log-likelihood is that of the stored (floored) parameters
    assert math.isclose(m.score(db), m.log_likelihood, rel_tol=1e-12)
    # states are in decreasing expected occupancy
    occ = m.info["occupancy"]
    assert np.all(np.diff(occ) <= 1e-12)


def test_em_improves_on_its_start():
    # invariant: Baum-Welch never ends below the log-likelihood of its start point
    db = _sample_db(n=10, length=30)
    X, lengths = db.tokens.astype(np.int64), db.lengths
    seed = 11
    start, trans, emis = _hmm.start_point(X, 3, 6, seed)  # fit_restart's start
    ll0 = _hmm.forward_loglik(start, trans, emis, X, lengths).sum()
    fit = _hmm.fit_restart(X, lengths, 3, 6, seed, emission_floor=0.0)
    assert fit["loglik"] >= ll0


# ------------------------------------------------------------- selection (BIC)
def test_selection_table_bic_formula():
    db = _sample_db(n=8, length=25)
    table, models = select_n_states(db, n_states=[1, 2], n_restarts=1, n_splits=2, random_state=0,
                                    learners=db.learners)
    for row in table.itertuples(index=False):
        k = (row.n_states - 1) + row.n_states * (row.n_states - 1) + row.n_states * 5
        assert row.n_parameters == k
        assert math.isclose(row.bic, -2 * row.log_likelihood + k * math.log(db.n_tokens))
        assert math.isclose(models[row.n_states].bic(db), row.bic, rel_tol=1e-12)
        assert np.isfinite(row.heldout_loglik)
    assert table["best_bic"].sum() == 1 and table["best_heldout"].sum() == 1
    # 1 state = token frequencies (closed form maximum-likelihood estimate)
    freq = np.bincount(db.tokens, minlength=6) / db.n_tokens
    np.testing.assert_allclose(models[1].emissionprob[0], _hmm.apply_emission_floor(
        freq[None, :], 1e-4)[0], atol=1e-6)


# -------------------------------------------------------------- comparisons
def test_path_measures_hand_worked():
    states = np.array([0, 0, 1, 1, 1, 0, 2, 2])
    occ, dwell, rate = path_measures(states, np.array([6, 2]), 3)
    np.testing.assert_allclose(occ, [[0.5, 0.5, 0], [0, 0, 1]])
    np.testing.assert_allclose(dwell[0, :2], [1.5, 3.0])
    assert np.isnan(dwell[0, 2]) and dwell[1, 2] == 2.0
    assert rate[0, 0, 1] == pytest.approx(0.2) and rate[0, 1, 0] == pytest.approx(0.2)
    assert rate[1].sum() == 0.0  # no switch in the second sequence


def test_compare_state_paths_matches_scipy():
    db = _small_db()
    m = fit_phase_model(db, n_states=2, n_restarts=1, random_state=0)
    _, states = m.decode(db)
    table = compare_state_paths(m, db, states)
    occ, _, _ = path_measures(states, db.lengths, 2)
    row = table[(table["measure"] == "occupancy") & (table["state"] == "S1")].iloc[0]
    a, b = occ[db.groups == 0, 0], occ[db.groups == 1, 0]
    if np.ptp(np.concatenate([a, b])) > 0:
        ref = mannwhitneyu(a, b, alternative="two-sided")
        assert row["u_statistic"] == ref.statistic and row["p_value"] == ref.pvalue
    assert list(table.columns[:4]) == ["measure", "state", "to_state", "state_name"]
    tested = table["p_value"].notna()
    assert table.loc[~tested, "q_value"].isna().all()
    np.testing.assert_allclose(table.loc[tested, "q_value"],
                               multipletests(table.loc[tested, "p_value"], method="fdr_bh")[1])


def test_align_states_recovers_a_permutation():
    gen, _ = _generators()
    order = [2, 0, 1]
    permuted = PhaseModel.from_parameters(gen.startprob[order],
                                          gen.transmat[np.ix_(order, order)],
                                          gen.emissionprob[order], VOCAB)
    al = align_states(gen, permuted)
    assert al["state_b"].tolist() == ["S2", "S3", "S1"]
    np.testing.assert_allclose(al["js_distance"], 0.0, atol=1e-7)


# ------------------------------------------------------ Juang-Rabiner distance
def test_model_distance_properties():
    gen_s, gen_w = _generators()
    same = model_distance(gen_s, gen_s, n_tokens=3000, random_state=0)
    assert same["d_ab"] == 0.0 and same["symmetric"] == 0.0  # D(l, l) = 0
    ab = model_distance(gen_s, gen_w, n_tokens=3000, random_state=0)
    ba = model_distance(gen_w, gen_s, n_tokens=3000, random_state=0)
    assert ab["symmetric"] == ba["symmetric"]  # symmetrised
    assert ab["d_ab"] > 0 and ab["d_ba"] > 0  # different models


def test_model_distance_equals_kl_for_one_state_models():
    # With one state, tokens are i.i.d., so D(l1, l2) is the Kullback-Leibler divergence
    # KL(b2 || b1) (Juang & Rabiner 1985); reference: scipy.stats.entropy
    b1, b2 = [0.5, 0.3, 0.2], [0.2, 0.2, 0.6]
    m1 = PhaseModel.from_parameters([1.0], [[1.0]], [b1])
    m2 = PhaseModel.from_parameters([1.0], [[1.0]], [b2])
    d = model_distance(m1, m2, lengths=[100], n_tokens=200_000, random_state=1)
    assert d["d_ab"] == pytest.approx(entropy(b2, b1), abs=0.01)
    assert d["d_ba"] == pytest.approx(entropy(b1, b2), abs=0.01)


# ------------------------------------------------------------ state sequences
def test_state_db_and_state_paths_table(tmp_path):
    db = _small_db()
    short = SequenceDB.from_lists(
        [db.decode(i) for i in range(db.n_sequences)] + [["reset"]],
        groups=["strong"] * 5 + ["weak"] * 6, vocab=db.vocab, pause_tokens=["pause:long"])
    res = fit_phases(short, n_states=2, n_restarts=1, n_splits=0, n_permutations=0)
    sdb = res.state_db
    assert sdb.n_sequences == 10 and sdb.n_tokens == db.n_tokens
    assert all(v.startswith(("S1:", "S2:")) for v in sdb.vocab)
    assert sdb.vocab[0] == "S1:" + res.models["pooled"].state_names[0]
    np.testing.assert_array_equal(sdb.source_rows, short.source_rows[:db.n_tokens])
    sp = res.state_paths
    assert list(sp.columns) == ["learner", "sequence", "position", "state", "state_name"]
    assert len(sp) == db.n_tokens and sp["sequence"].max() == 9
    assert [sdb.vocab[t].split(":")[0] for t in sdb.tokens] == sp["state"].tolist()
    # the short sequence is reported, not silently lost
    assert res.n_excluded == 1 and res.excluded["length"].tolist() == [1]
    folder = res.save(tmp_path / "phases")
    summary = json.loads((folder / "phases.json").read_text())
    assert summary["n_excluded"] == 1 and summary["n_sequences_used"] == 10
    models = load_phase_models(folder)
    for k, m in res.models.items():
        assert models[k].equals(m)
    assert SequenceDB.load(folder / "state_sequences").equals(sdb)
    for name in ("state_paths.csv", "state_selection.csv", "occupancy_comparison.csv",
                 "state_alignment.csv", "aligned_transitions.csv", "model_distance.csv",
                 "graph_pooled.graphml", "graph_group-weak.graphml", "model_group-strong.json"):
        assert (folder / name).is_file(), name


# ------------------------------------------------------------------ bad input
def test_token_unseen_in_one_group_keeps_floor_probability():
    db = _small_db()  # "pause:long" only in strong; "paint_pot", "reset" only in weak
    res = fit_phases(db, n_states=2, n_restarts=1, n_splits=0, n_permutations=0)
    assert res.unseen_tokens["strong"] == ["paint_pot", "reset", "set_water"]
    assert res.unseen_tokens["weak"] == ["advance_week", "measure_height", "pause:long"]
    strong = res.models["strong"]
    assert strong.emissionprob.min() > 0
    ll = strong.score_tokens(db)
    assert np.all(np.isfinite(ll))  # weak sequences are unlikely but possible


def test_all_sequences_too_short():
    db = SequenceDB.from_lists([["reset"], ["paint_pot"]], groups=["strong", "weak"])
    with pytest.raises(ParameterError, match="No sequence has at least 2 tokens"):
        fit_phases(db, n_states=2)


def test_state_range_larger_than_data():
    db = _small_db()  # 45 tokens, 7 symbols
    with pytest.raises(ParameterError, match="cannot support 6 states: that model has 71 free"):
        fit_phases(db, n_states="6-8", n_splits=0)
    with pytest.warns(SeqmineWarning, match=r"State counts \[5, 6\] .* capped at 4 states"):
        table, _ = select_n_states(db, n_states="3-6", n_restarts=1, n_splits=0)
    assert table["n_states"].tolist() == [3, 4]
    with pytest.raises(ParameterError, match="The strong data .* cannot support 4 states"):
        fit_phases(db, n_states=4, n_restarts=1, n_splits=0)


@pytest.mark.parametrize("kwargs, message", [
    ({"n_states": "2-x"}, r"must look like '3', '2-6' or '2,3,5'\. Got '2-x'"),
    ({"n_states": 0}, r"state counts >= 1\. Got 0"),
    ({"n_states": 2.5}, r"must be an int, a range or a list of ints"),
    ({"n_restarts": 0}, r"The 'n_restarts' parameter of fit_phases must be an int >= 1"),
    ({"criterion": "aic"}, r"'criterion' parameter of fit_phases must be one of 'bic', 'heldout'"),
    ({"criterion": "heldout", "n_splits": 0}, r"criterion='heldout' needs n_splits >= 2"),
    ({"min_length": 1}, r"'min_length' parameter of fit_phases must be an int >= 2"),
    ({"n_splits": 20}, r"needs at least 20 learners .* has 10"),
    ({"n_jobs": 0}, r"'n_jobs' parameter of fit_phases must be a positive int or -1"),
    ({"groups": ["middle"]}, r"Group 'middle' is not in the data \(groups: strong, weak\)"),
])
def test_bad_parameters(kwargs, message):
    kw = {"n_states": 2, "n_restarts": 1, "n_permutations": 0}
    kw.update(kwargs)
    with pytest.raises(ParameterError, match=message):
        fit_phases(_small_db(), **kw)


def test_bad_database_argument():
    with pytest.raises(ParameterError, match="fit_phases needs a SequenceDB; got list"):
        fit_phases([[1, 2]])


def test_group_named_pooled_is_refused():
    db = SequenceDB.from_lists([["a", "b"]] * 4, groups=["pooled", "weak"] * 2)
    with pytest.raises(ParameterError, match="A group is named 'pooled'"):
        fit_phases(db, n_states=1, n_permutations=0, n_splits=0)


def test_permutation_reference_under_the_null():
    # both groups drawn from one generator: the observed statistic is of the size of
    # the permutation values and p-values are not piled at the minimum 0.1 (with 9
    # permutations a valid test gives p = 0.1 one time in ten)
    gen, _ = _generators()
    p_values = []
    for k in range(3):
        X, _ = gen.sample([40] * 40, random_state=100 + k)
        seqs = [[VOCAB[t] for t in X[i * 40:(i + 1) * 40]] for i in range(40)]
        db = SequenceDB.from_lists(seqs, groups=["strong", "weak"] * 20, vocab=VOCAB)
        res = fit_phases(db, n_states=3, n_restarts=2, n_splits=0, n_permutations=9, random_state=1,
                         distance_tokens=4000)
        d = res.distances.iloc[0]
        assert d["test_statistic"] < 3 * d["permutation_mean"]
        assert d["symmetric"] < 0.1
        p_values.append(d["p_value"])
    assert np.mean(p_values) > 0.2


def test_no_groups_gives_pooled_model_only():
    db = SequenceDB.from_lists([["a", "b", "a"], ["b", "a", "b", "b"]] * 3)
    res = fit_phases(db, n_states=1, n_restarts=1, n_splits=0)
    assert list(res.models) == ["pooled"]
    assert res.path_comparison.empty and res.distances.empty and res.alignment.empty


def test_heldout_criterion_uses_heldout_column():
    db = _sample_db(n=10, length=30)
    res = fit_phases(db, n_states=[1, 2, 3], n_restarts=1, n_splits=2, criterion="heldout",
                     n_permutations=0)
    sel = res.selection
    best = sel.loc[sel["heldout_loglik"].idxmax(), "n_states"]
    assert res.n_states == best
    assert sel.loc[sel["selected"], "n_states"].tolist() == [best]
    assert np.all(np.isfinite(sel["heldout_loglik_per_token"]))


@pytest.mark.slow
def test_restarts_on_a_dask_cluster_equal_serial():
    # scale-out: joblib routes the restarts to a Dask cluster (in-process here)
    distributed = pytest.importorskip("distributed")
    import joblib

    db = _sample_db(n=10, length=30)
    try:
        cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                           dashboard_address=":0")
    except Exception as exc:  # the cluster itself, not our code, failed to start
        pytest.skip(f"could not start an in-process Dask cluster: {exc!r}")
    with cluster, distributed.Client(cluster), joblib.parallel_config(backend="dask"):
        on_dask = fit_phase_model(db, n_states=2, n_restarts=3, random_state=2, n_jobs=2)
    assert on_dask.equals(fit_phase_model(db, n_states=2, n_restarts=3, random_state=2))
