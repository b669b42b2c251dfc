"""Tests of seqmine.scoring.contrast on PatternSets built by brute force or from random matrices."""

import itertools

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from _contrast_helpers import ACTIONS, PATTERNS, _instances, brute_patternset, random_db  # noqa: F401
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError, SeqmineWarning
from seqmine.mining.patterns import PatternSet
from seqmine.scoring.contrast import contrast, pairwise_contrast, sequence_rates
from seqmine.scoring.multitest import adjust_pvalues
from seqmine.scoring.permutation import bootstrap_significance, westfall_young_minp
from seqmine.scoring.redundancy import jaccard_pairs, prune_redundant


def random_patternset(n_seq=60, n_pat=30, seed=0, effect=None, n_groups=2, density=0.3):
    """PatternSet over a random sparse count matrix (no vocabulary meaning)."""
    rng = np.random.default_rng(seed)
    groups = np.arange(n_seq) % n_groups
    prob = np.full((n_seq, n_pat), density)
    if effect is not None:
        for j, delta in effect.items():
            prob[groups == 0, j] = min(density + delta, 1.0)
    pres = rng.random((n_seq, n_pat)) < prob
    counts = pres * rng.integers(1, 4, size=(n_seq, n_pat))
    names = [f"g{i}" for i in range(n_groups)]
    vocab = [f"t{j}" for j in range(n_pat)]
    sup = np.stack([(counts[groups == g] > 0).sum(axis=0) for g in range(n_groups)], axis=1)
    return PatternSet(patterns=[(j,) for j in range(n_pat)], vocab=vocab,
                      is_pause=np.zeros(n_pat, bool), group_names=names,
                      group_sizes=np.bincount(groups, minlength=n_groups), support_counts=sup,
                      counts=sp.csr_matrix(counts), seq_groups=groups)


# ------------------------------------------------------------ contrast table
def test_columns_match_output_contract():
    db = random_db()
    ps = brute_patternset(db, PATTERNS)
    df = contrast(ps, db, n_bootstrap=10)
    assert list(df.columns) == [
        "pattern_id", "pattern", "tokens", "length", "support_strong", "support_weak",
        "rate_strong", "rate_weak", "p_value", "q_value", "p_volume", "q_volume", "p_order",
        "q_order", "evidence", "favours", "risk_difference", "odds_ratio", "log_odds_ratio",
        "growth_rate", "cohens_h", "cliffs_delta", "p_rate", "q_rate", "stability",
        "replication", "redundant_of"]
    assert set(df["pattern"]) == {" > ".join(p) for p in PATTERNS}
    assert df["p_value"].is_monotonic_increasing
    assert df.attrs["groups"] == ["strong", "weak"] and df.attrs["rate_unit"] == "tokens"


def test_statistics_equal_references_row_by_row():
    db = random_db(n=50, seed=3)
    ps = brute_patternset(db, PATTERNS)
    df = contrast(ps, db, n_bootstrap=0, redundancy=None).set_index("pattern")
    counts = ps.counts.toarray()
    rates = counts / db.lengths[:, None] * 100
    s, w = db.groups == 0, db.groups == 1
    for j, pat in enumerate(PATTERNS):
        row = df.loc[" > ".join(pat)]
        pres = counts[:, j] > 0
        a, c = int(pres[s].sum()), int(pres[w].sum())
        b, d = int(s.sum()) - a, int(w.sum()) - c
        # Fisher exact on presence: scipy.stats.fisher_exact
        assert row["p_value"] == pytest.approx(stats.fisher_exact([[a, b], [c, d]]).pvalue,
                                               rel=1e-8)
        assert row["support_strong"] == pytest.approx(a / s.sum())
        assert row["rate_weak"] == pytest.approx(rates[w, j].mean())
        # Mann-Whitney U on rates: scipy.stats.mannwhitneyu
        assert row["p_rate"] == pytest.approx(stats.mannwhitneyu(rates[s, j], rates[w, j]).pvalue,
                                              rel=1e-12)
        # Cliff's delta: brute-force pairwise count (Cliff 1993 definition)
        diff = rates[s, j][:, None] - rates[w, j][None, :]
        delta = ((diff > 0).sum() - (diff < 0).sum()) / diff.size
        assert row["cliffs_delta"] == pytest.approx(delta, abs=1e-12)
        assert row["risk_difference"] == pytest.approx(a / s.sum() - c / w.sum())
        assert row["cohens_h"] == pytest.approx(
            2 * np.arcsin(np.sqrt(a / s.sum())) - 2 * np.arcsin(np.sqrt(c / w.sum())))
    # BH on the Fisher p-values (our adjust_pvalues is checked against statsmodels)
    np.testing.assert_allclose(df["q_value"], adjust_pvalues(df["p_value"].to_numpy(), "bh"))


def test_planted_difference_is_found_in_the_right_direction():
    ps = random_patternset(n_seq=120, n_pat=20, seed=1, effect={3: 0.5, 7: -0.25})
    df = contrast(ps, n_bootstrap=50, random_state=4).set_index("pattern")
    assert df.loc["t3", "favours"] == "g0" and df.loc["t7", "favours"] == "g1"
    assert df.loc["t3", "stability"] > 0.9
    assert df.loc["t3", "odds_ratio"] > 1 > df.loc["t7", "odds_ratio"]
    # rates were not normalised (no lengths): raw instance counts
    assert df.attrs["rate_unit"] == "count"
    nulls = df.drop(index=["t3", "t7"])
    assert (nulls["favours"] == "").mean() > 0.8
    assert nulls["stability"].mean() < 0.2


def test_favours_only_when_significant():
    ps = random_patternset(n_seq=80, seed=2, effect={0: 0.6})
    df = contrast(ps, n_bootstrap=0, alpha=0.05)
    assert np.all((df["favours"] != "") == (df["q_value"] <= 0.05))
    df = contrast(ps, n_bootstrap=0, alpha=1e-12)
    assert (df["favours"] == "").all()


def test_same_seed_same_table_and_groups_order_flips_signs():
    db = random_db(n=40, seed=8)
    ps = brute_patternset(db, PATTERNS)
    kw = dict(correction="westfall-young", n_permutations=99, n_bootstrap=20, random_state=5)
    a, b = contrast(ps, db, **kw), contrast(ps, db, **kw)
    pd.testing.assert_frame_equal(a, b)
    flip = contrast(ps, db, groups=["weak", "strong"], **kw).set_index("pattern")
    a = a.set_index("pattern").loc[flip.index]
    np.testing.assert_allclose(flip["risk_difference"], -a["risk_difference"])
    np.testing.assert_allclose(flip["log_odds_ratio"], -a["log_odds_ratio"], atol=1e-12)
    np.testing.assert_allclose(flip["cliffs_delta"], -a["cliffs_delta"], atol=1e-12)
    np.testing.assert_allclose(flip["p_value"], a["p_value"])


def test_rate_units():
    db = SequenceDB.from_lists([["a", "p", "b"], ["a", "b"], ["b", "a", "p", "b"], ["b"]] * 2,
                               groups=["x", "y", "x", "y"] * 2, pause_tokens=["p"])
    ps = brute_patternset(db, [("a", "b")])
    np.testing.assert_allclose(sequence_rates(ps, db.lengths).toarray().ravel()[:4],
                               [100 / 3, 50.0, 25.0, 0.0])
    with pytest.warns(SeqmineWarning, match="fewer than 5"):
        tok = contrast(ps, db, n_bootstrap=0)
    with pytest.warns(SeqmineWarning, match="fewer than 5"):
        act = contrast(ps, db, rate_unit="actions", n_bootstrap=0)
    # tokens: x rows have 100/3 and 25 -> mean 29.1667; actions: 50 and 100/3
    assert tok["rate_x"].iloc[0] == pytest.approx((100 / 3 + 25) / 2)
    assert act["rate_x"].iloc[0] == pytest.approx((50 + 100 / 3) / 2)
    with pytest.raises(ParameterError, match="rate_unit='actions' of contrast needs db="):
        contrast(ps, lengths=db.lengths, rate_unit="actions")
    with pytest.raises(ParameterError, match="needs sequence lengths"):
        contrast(ps, rate_unit="tokens")


# ------------------------------------------------------------ Westfall-Young
def _brute_force_minp(pres, labels, n_perm, seed):
    """Step-down min-P by direct loops with scipy.stats.fisher_exact (Westfall & Young
    1993, algorithm 2.8), replaying the documented permutation stream."""
    n1, n2 = (labels == 0).sum(), (labels == 1).sum()

    def pvals(lab):
        out = []
        for j in range(pres.shape[1]):
            a = pres[lab == 0, j].sum()
            c = pres[lab == 1, j].sum()
            out.append(stats.fisher_exact([[a, n1 - a], [c, n2 - c]]).pvalue)
        return np.array(out)

    raw = pvals(labels)
    order = np.argsort(raw, kind="stable")
    rng = np.random.default_rng(seed)
    exceed = np.zeros(len(raw))
    for _ in range(n_perm):
        pb = pvals(rng.permutation(labels))[order]
        q = np.minimum.accumulate(pb[::-1])[::-1]
        exceed += q <= raw[order] * (1 + 1e-7)
    adj = np.maximum.accumulate((exceed + 1) / (n_perm + 1))
    out = np.empty(len(raw))
    out[order] = adj
    return raw, out


def test_westfall_young_equals_brute_force_loop():
    ps = random_patternset(n_seq=24, n_pat=6, seed=7, effect={0: 0.5, 1: 0.3})
    pres = ps.presence().toarray()
    labels = ps.seq_groups
    raw, adj = westfall_young_minp(ps.presence(), labels, n_permutations=150, random_state=3,
                                   batch_size=7)
    ref_raw, ref_adj = _brute_force_minp(pres, labels, 150, 3)
    np.testing.assert_allclose(raw, ref_raw, rtol=1e-8)
    np.testing.assert_allclose(adj, ref_adj, rtol=0, atol=1e-12)


def test_westfall_young_single_pattern_matches_exact_permutation_distribution():
    # With one pattern the min-P adjusted p-value is a Monte-Carlo estimate of the
    # permutation p-value P(p* <= p_obs), here enumerated over all C(12, 6) labellings.
    pres = np.array([1, 1, 1, 1, 1, 0, 1, 0, 0, 0, 1, 0])[:, None]
    labels = np.array([0] * 6 + [1] * 6)
    raw, adj = westfall_young_minp(sp.csr_matrix(pres), labels, n_permutations=4000, random_state=2)
    hits = total = 0
    for first in itertools.combinations(range(12), 6):
        lab = np.ones(12, int)
        lab[list(first)] = 0
        a = pres[lab == 0, 0].sum()
        c = pres[lab == 1, 0].sum()
        p = stats.fisher_exact([[a, 6 - a], [c, 6 - c]]).pvalue
        hits += p <= raw[0] * (1 + 1e-7)
        total += 1
    exact = hits / total
    se = np.sqrt(exact * (1 - exact) / 4000)
    assert abs(adj[0] - exact) < 4 * se + 1 / 4001


def test_westfall_young_batch_independent_and_bounded():
    ps = random_patternset(n_seq=50, n_pat=40, seed=9, effect={2: 0.5})
    r1, a1 = westfall_young_minp(ps.presence(), ps.seq_groups, n_permutations=60, random_state=1,
                                 batch_size=60)
    r2, a2 = westfall_young_minp(ps.presence(), ps.seq_groups, n_permutations=60, random_state=1,
                                 batch_size=7)
    np.testing.assert_array_equal(a1, a2)
    assert np.all((a1 >= 1 / 61) & (a1 <= 1))
    # FWER adjustment is never below the raw p-value by more than Monte-Carlo noise:
    # for the smallest raw p it is at least the single-test permutation p.
    assert a1[np.argmin(r1)] <= 0.05


def test_westfall_young_more_groups_uses_chi_square():
    ps = random_patternset(n_seq=60, n_pat=10, seed=4, n_groups=3, effect={0: 0.6})
    raw, adj = westfall_young_minp(ps.presence(), ps.seq_groups, n_permutations=99, random_state=0)
    counts = np.stack([ps.support_counts[:, g] for g in range(3)])
    ref = [stats.chi2_contingency(np.stack([counts[:, j], ps.group_sizes - counts[:, j]], 1),
                                  correction=False).pvalue for j in range(10)]
    np.testing.assert_allclose(raw, ref, rtol=1e-10)
    assert adj[0] < 0.05


# ------------------------------------------------------------------ stability
def test_bootstrap_equals_brute_force_replay():
    ps = random_patternset(n_seq=30, n_pat=5, seed=12, effect={0: 0.5})
    pres = ps.presence().toarray()
    labels = ps.seq_groups
    frac = [pres[labels == g].mean(axis=0) for g in (0, 1)]
    direction = np.sign(frac[0] - frac[1]).astype(int)
    got = bootstrap_significance(ps.presence(), labels, direction, n_bootstrap=25, alpha=0.1,
                                 random_state=6, batch_size=4)
    rng = np.random.default_rng([6, 1])
    members = [np.flatnonzero(labels == g) for g in (0, 1)]
    hits = np.zeros(5)
    for _ in range(25):
        draws = [rng.choice(m, size=len(m), replace=True) for m in members]
        for j in range(5):
            a, c = pres[draws[0], j].sum(), pres[draws[1], j].sum()
            n1, n2 = len(draws[0]), len(draws[1])
            p = stats.fisher_exact([[a, n1 - a], [c, n2 - c]]).pvalue
            same = np.sign(a / n1 - c / n2) == direction[j] != 0
            hits[j] += (p <= 0.1) and same
    np.testing.assert_allclose(got, hits / 25)


# ----------------------------------------------------------------- redundancy
def test_jaccard_pairs_match_brute_force():
    rng = np.random.default_rng(0)
    base = rng.random((40, 12)) < 0.4
    pres = np.concatenate([base, base[:, :4], base[:, 4:6] ^ (rng.random((40, 2)) < 0.05)], 1)
    pres[:, 5] = False
    i, j = jaccard_pairs(sp.csr_matrix(pres.astype(int)), 0.8)
    got = set(zip(i.tolist(), j.tolist()))
    ref = set()
    for x in range(pres.shape[1]):
        for y in range(pres.shape[1]):
            inter = (pres[:, x] & pres[:, y]).sum()
            union = (pres[:, x] | pres[:, y]).sum()
            if x != y and union and inter / union >= 0.8:
                ref.add((x, y))
    assert got == ref and len(ref) >= 8


def test_redundant_duplicate_points_to_shorter_equal_pattern():
    db = SequenceDB.from_lists(
        [["set_light", "advance_week", "measure_height"]] * 5 + [["reset", "paint_pot"]] * 5
        + [["set_light", "reset"]] * 2, groups=["strong"] * 5 + ["weak"] * 7)
    ps = brute_patternset(db, [("advance_week", "measure_height"), ("measure_height",),
                               ("reset",), ("set_light",)])
    df = contrast(ps, db, n_bootstrap=0, redundancy=0.9).set_index("pattern")
    # identical supporting sets and p-values: the shorter pattern is kept
    assert df.loc["advance_week > measure_height", "redundant_of"] == \
        df.loc["measure_height", "pattern_id"]
    assert df.loc["measure_height", "redundant_of"] == ""
    assert df.loc["set_light", "redundant_of"] == ""
    dropped = contrast(ps, db, n_bootstrap=0, drop_redundant=True)
    assert "advance_week > measure_height" not in set(dropped["pattern"])
    none = contrast(ps, db, n_bootstrap=0, redundancy=None)
    assert (none["redundant_of"] == "").all()


def test_prune_order_decides_which_is_kept():
    pres = sp.csr_matrix(np.array([[1, 1], [1, 1], [0, 0], [1, 1]]))
    assert prune_redundant(pres, [0, 1]).tolist() == [-1, 0]
    assert prune_redundant(pres, [1, 0]).tolist() == [1, -1]


# ---------------------------------------------------------------- many groups
def test_three_groups_omnibus_and_pairwise():
    db = random_db(n=60, seed=5, n_groups=3)
    ps = brute_patternset(db, PATTERNS)
    df = contrast(ps, db, n_bootstrap=10).set_index("pattern")
    for col in ("chi2", "cramers_v", "kruskal_h", "support_middle"):
        assert col in df.columns
    counts = ps.counts.toarray()
    rates = counts / db.lengths[:, None] * 100
    for j, pat in enumerate(PATTERNS):
        pres = counts[:, j] > 0
        table = np.array([[pres[db.groups == g].sum(), (~pres[db.groups == g]).sum()]
                          for g in range(3)])
        row = df.loc[" > ".join(pat)]
        if table[:, 0].sum() in (0, 60):
            continue
        ref = stats.chi2_contingency(table, correction=False)
        assert row["p_value"] == pytest.approx(ref.pvalue, rel=1e-10)
        kw = stats.kruskal(*[rates[db.groups == g, j] for g in range(3)])
        assert row["p_rate"] == pytest.approx(kw.pvalue, rel=1e-10)
    pw = pairwise_contrast(ps, db)
    assert len(pw) == 3 * len(PATTERNS)
    assert list(pw[["group_a", "group_b"]].drop_duplicates().itertuples(index=False, name=None)) \
        == [("strong", "weak"), ("strong", "middle"), ("weak", "middle")]
    two = contrast(ps, db, groups=["strong", "middle"], n_bootstrap=0).set_index("pattern")
    sub = pw[(pw.group_a == "strong") & (pw.group_b == "middle")].set_index("pattern")
    np.testing.assert_allclose(sub["p_value"], two.loc[sub.index, "p_value"])
    np.testing.assert_allclose(sub["cliffs_delta"], two.loc[sub.index, "cliffs_delta"])
    np.testing.assert_allclose(pw["q_value"], adjust_pvalues(pw["p_value"].to_numpy(), "bh"))
    # the volume-adjusted and order tests of a pair are those of the two-group table
    for col in ("p_volume", "p_order"):
        np.testing.assert_allclose(sub[col], two.loc[sub.index, col], equal_nan=True)
    for col in ("q_volume", "q_order"):
        np.testing.assert_allclose(
            pw[col], adjust_pvalues(pw["p" + col[1:]].to_numpy(), "bh"), equal_nan=True)
    assert set(pw["evidence"]) <= {"order", "presence", "volume", ""}
    assert ((pw["favours"] != "") == (pw["evidence"] != "")).all()


# ----------------------------------------------------------------- bad input
def test_single_group_is_refused():
    db = SequenceDB.from_lists([["a", "b"]] * 6, groups=["strong"] * 6)
    ps = brute_patternset(db, [("a",)])
    with pytest.raises(ParameterError, match="at least two groups with sequences; found 'strong'"):
        contrast(ps, db)


def test_tiny_group_is_refused_and_small_group_warned():
    db = SequenceDB.from_lists([["a", "b"]] * 6 + [["b"]], groups=["strong"] * 6 + ["weak"])
    ps = brute_patternset(db, [("a",)])
    with pytest.raises(ParameterError, match="Group 'weak' has 1 sequence.*at least 2"):
        contrast(ps, db)
    db = SequenceDB.from_lists([["a", "b"]] * 6 + [["b"]] * 3, groups=["strong"] * 6 + ["weak"] * 3)
    ps = brute_patternset(db, [("a",)])
    with pytest.warns(SeqmineWarning, match=r"Group\(s\) 'weak' have fewer than 5"):
        df = contrast(ps, db, n_bootstrap=5)
    assert df["p_value"].iloc[0] == pytest.approx(stats.fisher_exact([[6, 0], [0, 3]]).pvalue)


def test_identical_support_everywhere_warns_and_gives_ones():
    db = SequenceDB.from_lists([["a", "b"]] * 12, groups=["strong", "weak"] * 6)
    ps = brute_patternset(db, [("a",), ("b",), ("a", "b")])
    with pytest.warns(SeqmineWarning, match="No pattern's presence varies"):
        df = contrast(ps, db, correction="westfall-young", n_permutations=20)
    assert (df["p_value"] == 1).all() and (df["favours"] == "").all()
    assert (df["q_value"] == 1).all() and (df["stability"] == 0).all()
    # with identical supporting sets all but one are redundant
    assert (df["redundant_of"] != "").sum() == 2


def test_option_and_shape_errors():
    db = random_db(n=20)
    ps = brute_patternset(db, PATTERNS[:2])
    with pytest.raises(ParameterError, match="Group 'best' of contrast is not among"):
        contrast(ps, db, groups=["best", "weak"])
    with pytest.raises(ParameterError, match="names a group twice"):
        contrast(ps, db, groups=["weak", "weak"])
    with pytest.raises(ParameterError, match="'correction' parameter of contrast must be one of"):
        contrast(ps, db, correction="bonferroni")
    with pytest.raises(ParameterError, match="'alpha' parameter of contrast"):
        contrast(ps, db, alpha=0)
    with pytest.raises(ParameterError, match="'redundancy' parameter of contrast"):
        contrast(ps, db, redundancy=1.5)
    with pytest.raises(ParameterError, match="needs a PatternSet"):
        contrast(ps.counts, db)
    with pytest.raises(ParameterError, match="'lengths' must have one entry per sequence"):
        contrast(ps, lengths=[3, 4])
    with pytest.raises(ParameterError, match="The SequenceDB has 5 sequences"):
        contrast(ps, db.subset(range(5)))


def test_no_patterns_gives_empty_table_with_columns():
    db = random_db(n=20)
    ps = brute_patternset(db, [])
    df = contrast(ps, db)
    assert len(df) == 0 and "q_value" in df.columns and "redundant_of" in df.columns


def test_ungrouped_sequences_are_left_out():
    db = random_db(n=40, seed=2)
    groups = db.groups.copy()
    groups[:6] = -1
    db2 = db.with_groups(groups, db.group_names)
    ps2 = brute_patternset(db2, PATTERNS)
    df2 = contrast(ps2, db2, n_bootstrap=0, redundancy=None)
    sub = db.subset(np.arange(6, 40))
    df = contrast(brute_patternset(sub, PATTERNS), sub, n_bootstrap=0, redundancy=None)
    pd.testing.assert_frame_equal(df, df2, check_like=False)


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10_000), st.sampled_from([0.5, 0.75, 0.9, 1.0]))
def test_prune_matches_brute_force_greedy(seed, threshold):
    # Brute force: visit patterns in priority order; redundant when some earlier kept
    # pattern has Jaccard >= threshold; point to the earliest such pattern.
    rng = np.random.default_rng(seed)
    base = rng.random((15, 5)) < 0.5
    flips = rng.random((15, 12)) < 0.08
    pres = base[:, rng.integers(0, 5, 12)] ^ flips
    order = rng.permutation(12)
    got = prune_redundant(sp.csr_matrix(pres.astype(int)), order, threshold)
    kept, ref = [], np.full(12, -1)
    for j in order:
        for i in kept:
            union = (pres[:, i] | pres[:, j]).sum()
            if union and (pres[:, i] & pres[:, j]).sum() / union >= threshold:
                ref[j] = i
                break
        else:
            kept.append(j)
    np.testing.assert_array_equal(got, ref)


# ------------------------------------------------------------ learner as unit
def _session_db():
    rng = np.random.default_rng(21)
    seqs, groups, learners = [], [], []
    for k in range(24):
        g = ["strong", "weak"][k % 2]
        for _ in range(int(rng.integers(1, 4))):
            p = np.ones(len(ACTIONS))
            p[3] += 2.0 if g == "strong" else 0.0
            seqs.append(list(rng.choice(ACTIONS, size=int(rng.integers(3, 9)), p=p / p.sum())))
            groups.append(g)
            learners.append(f"learner{k:02d}")
    return SequenceDB.from_lists(seqs, groups=groups, group_names=["strong", "weak"],
                                 learners=learners, pause_tokens=["pause:long"], vocab=ACTIONS)


def test_learner_unit_merges_sessions():
    db = _session_db()
    ps = brute_patternset(db, PATTERNS)
    with pytest.warns(SeqmineWarning, match="Some learners have several sequences"):
        contrast(ps, db, n_bootstrap=0, unit="sequence")
    # the default (unit="learner") merges a learner's sessions: each learner counts once
    pd.testing.assert_frame_equal(contrast(ps, db, n_bootstrap=0),
                                  contrast(ps, db, n_bootstrap=0, unit="learner"))
    got = contrast(ps, db, n_bootstrap=20, correction="westfall-young",
                   n_permutations=50)  # learners are the default unit
    assert got.attrs["unit"] == "learner"
    # reference: merge by hand, loop over learners
    names = list(dict.fromkeys(db.learners))
    counts = ps.counts.toarray()
    merged = np.array([counts[db.learners == n].sum(axis=0) for n in names])
    lengths = np.array([db.lengths[db.learners == n].sum() for n in names])
    lgroups = np.array([db.groups[db.learners == n][0] for n in names])
    sup = np.stack([(merged[lgroups == g] > 0).sum(axis=0) for g in range(2)], axis=1)
    ref_ps = PatternSet(patterns=ps.patterns, vocab=ps.vocab, is_pause=ps.is_pause,
                        group_names=ps.group_names, group_sizes=np.bincount(lgroups),
                        support_counts=sup, counts=sp.csr_matrix(merged), seq_groups=lgroups)
    ref = contrast(ref_ps, lengths=lengths, n_bootstrap=20,
                   correction="westfall-young", n_permutations=50)
    ref.attrs, got.attrs = {}, {}
    # the volume, order and evidence columns need events and token counts per learner,
    # which 'lengths' alone does not give; tests/test_evidence.py checks them
    adjusted = ["p_volume", "q_volume", "p_order", "q_order", "evidence", "favours",
                "replication"]
    pd.testing.assert_frame_equal(got.drop(columns=adjusted), ref.drop(columns=adjusted))
    assert ((got["support_strong"] * 12) % 1 == 0).all()  # shares of 12 learners


def test_learner_unit_errors():
    db = _session_db()
    ps = brute_patternset(db, PATTERNS[:2])
    # without the database nothing says which sequences share a learner: each sequence
    # is then its own learner (the same table as unit="sequence")
    alone = contrast(ps, unit="learner", n_bootstrap=0, redundancy=None)
    same = contrast(ps, unit="sequence", n_bootstrap=0, redundancy=None)
    alone.attrs, same.attrs = {}, {}
    pd.testing.assert_frame_equal(alone, same)
    groups = db.groups.copy()
    groups[1] = 1 - groups[1]  # one session of a learner moves to the other group
    db2 = db.with_groups(groups, db.group_names)
    ps2 = brute_patternset(db2, PATTERNS[:2])
    bad = db2.learners[1]
    with pytest.raises(ParameterError, match=f"Learner '{bad}' has sequences in different"):
        contrast(ps2, db2, unit="learner")
    with pytest.raises(ParameterError, match="'unit' parameter of contrast must be one of"):
        contrast(ps, db, unit="session")


@pytest.mark.parametrize("n_groups", [2, 3])
def test_westfall_young_rates_equals_brute_force_loop(n_groups):
    # Direct loops with scipy.stats.mannwhitneyu(method="asymptotic") / scipy.stats.kruskal
    # per pattern and permutation, replaying the documented permutation stream.
    from seqmine.scoring.permutation import westfall_young_rates

    ps = random_patternset(n_seq=30, n_pat=6, seed=5, effect={0: 0.5}, n_groups=n_groups)
    rates = sequence_rates(ps, np.arange(30) % 7 + 3)
    dense = rates.toarray()
    labels = ps.seq_groups
    raw, adj = westfall_young_rates(rates, labels, n_permutations=40, random_state=8, batch_size=9)

    def pvals(lab):
        if n_groups == 2:
            return np.array([stats.mannwhitneyu(dense[lab == 0, j], dense[lab == 1, j],
                                                method="asymptotic").pvalue for j in range(6)])
        return np.array([stats.kruskal(*[dense[lab == g, j] for g in range(3)]).pvalue
                         for j in range(6)])

    ref_raw = pvals(labels)
    order = np.argsort(ref_raw, kind="stable")
    rng = np.random.default_rng(8)
    exceed = np.zeros(6)
    for _ in range(40):
        q = np.minimum.accumulate(pvals(rng.permutation(labels))[order][::-1])[::-1]
        exceed += q <= ref_raw[order] * (1 + 1e-7)
    ref_adj = np.empty(6)
    ref_adj[order] = np.maximum.accumulate((exceed + 1) / 41)
    np.testing.assert_allclose(raw, ref_raw, rtol=1e-10)
    np.testing.assert_allclose(adj, ref_adj, atol=1e-12)
    table = contrast(ps, lengths=np.arange(30) % 7 + 3, correction="westfall-young",
                     n_permutations=40, random_state=8, n_bootstrap=0, redundancy=None)
    np.testing.assert_allclose(table.set_index("pattern").loc[[f"t{j}" for j in range(6)],
                                                              "q_rate"], ref_adj, atol=1e-12)
