"""Volume-adjusted test, order test, replication and learner-level transitions, checked
against statsmodels, scipy and brute-force enumerators written here (sharing no code
with the implementation)."""

import itertools
from collections import Counter
from fractions import Fraction

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError
from seqmine.mining.miner import mine
from seqmine.scoring.adjusted import (
    activity_strata,
    chance_occurrences,
    cmh_from_counts,
    item_requirements,
)
from seqmine.scoring.contrast import contrast
from seqmine.scoring.evidence import classify_evidence
from seqmine.scoring.replication import split_half_replication, split_halves
from seqmine.scoring.transitions import learner_transition_tests, transitions


# ------------------------------------------------------------------ brute force
def _occurs(seq, pat, max_gap):
    """Pattern occurs in seq: contiguous (max_gap 0) or as a subsequence (None)."""
    k = len(pat)
    if max_gap == 0:
        return any(tuple(seq[i:i + k]) == tuple(pat) for i in range(len(seq) - k + 1))
    it = iter(seq)
    return all(any(t == p for t in it) for p in pat)


def _holds(seq, pat):
    have = Counter(seq)
    return all(have[t] >= c for t, c in Counter(pat).items())


def _chance(seq, pat):
    """Exact expected back-to-back occurrences of pat over random orders of seq."""
    n, k = len(seq), len(pat)
    have = Counter(seq)
    num, seen = Fraction(1), Counter()
    for t in pat:
        num *= have[t] - seen[t]
        seen[t] += 1
    den = 1
    for j in range(k):
        den *= n - j
    return (n - k + 1) * num / den


def _brute_strata(volume, n_strata):
    """Strata by the documented rule, by loops: edges are quantiles, ties go up."""
    edges = sorted(set(np.quantile(np.asarray(volume, float),
                                   np.linspace(0, 1, n_strata + 1)[1:-1]).tolist()))
    raw = [sum(1 for e in edges if v >= e) for v in volume]
    distinct = sorted(set(raw))
    return [distinct.index(r) for r in raw]


def _statsmodels_cmh(tables):
    """Mantel-Haenszel p-value (statsmodels) from a list of 2x2 tables; strata with
    fewer than two units carry no information and are left out (statsmodels divides by
    N - 1); None when no stratum has variation."""
    tabs = [np.array(t, float) for t in tables if np.sum(t) >= 2]
    tabs = [t for t in tabs if t[:, 0].sum() not in (0, t.sum()) and t.sum(axis=1).min() > 0]
    if not tabs:
        return None
    return StratifiedTable(np.dstack(tabs)).test_null_odds(correction=False).pvalue


def _brute_order_p(seqs, groups, pat, n_bins, max_gap):
    """p_order by loops: holders, exact chance index, bins, statsmodels CMH."""
    holders = [i for i, s in enumerate(seqs) if _holds(s, pat)]
    if not holders:
        return 1.0
    chance = {i: _chance(seqs[i], pat) for i in holders}
    bins = {i: min(n_bins * sum(chance[j] < chance[i] for j in holders) // len(holders),
                   n_bins - 1) for i in holders}
    tables = []
    for b in range(n_bins):
        t = np.zeros((2, 2))
        for i in holders:
            if bins[i] == b:
                t[groups[i], 0 if _occurs(seqs[i], pat, max_gap) else 1] += 1
        tables.append(t)
    p = _statsmodels_cmh(tables)
    return 1.0 if p is None else p


def _brute_volume_p(seqs, groups, pat, strata, max_gap):
    tables = []
    for s in sorted(set(strata)):
        t = np.zeros((2, 2))
        for i, seq in enumerate(seqs):
            if strata[i] == s:
                t[groups[i], 0 if _occurs(seq, pat, max_gap) else 1] += 1
        tables.append(t)
    p = _statsmodels_cmh(tables)
    return 1.0 if p is None else p


# ------------------------------------------------- Cochran-Mantel-Haenszel core
@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 12), st.integers(1, 12), st.floats(0, 1),
                          st.floats(0, 1)), min_size=1, max_size=6))
def test_cmh_equals_statsmodels_on_random_tables(strata):
    # Reference: statsmodels StratifiedTable.test_null_odds(correction=False), the
    # Mantel-Haenszel (1959) test of a common odds ratio of 1.
    n1 = np.array([s[0] for s in strata])
    n2 = np.array([s[1] for s in strata])
    a = np.floor(np.array([s[2] for s in strata]) * (n1 + 1)).clip(0, n1)
    c = np.floor(np.array([s[3] for s in strata]) * (n2 + 1)).clip(0, n2)
    p, stat, excess = cmh_from_counts(np.stack([a, c])[:, :, None], np.stack([n1, n2]))
    tables = [[[a[k], n1[k] - a[k]], [c[k], n2[k] - c[k]]] for k in range(len(strata))]
    ref = _statsmodels_cmh(tables)
    if ref is None:
        assert p[0] == 1.0 and stat[0] == 0.0
    else:
        assert p[0] == pytest.approx(ref, rel=1e-9, abs=1e-14)
        full = StratifiedTable(np.dstack([np.array(t, float) for t in tables
                                          if np.sum(t) >= 2]))
        expected = np.sum(full.table[0, 0] - full._apb * full._apc / full._n)
        assert excess[0, 0] == pytest.approx(expected, abs=1e-9)


def test_cmh_with_three_groups_and_one_stratum_is_scaled_pearson():
    # With one stratum the general-association statistic is (N - 1) / N times Pearson's
    # chi-square (Landis, Heyman & Koch 1978; from memory); reference: scipy.
    rng = np.random.default_rng(3)
    for _ in range(20):
        sizes = rng.integers(3, 15, 3)
        present = np.array([rng.integers(0, s + 1) for s in sizes])
        if present.sum() in (0, sizes.sum()):
            continue
        table = np.stack([present, sizes - present], axis=1)
        chi = stats.chi2_contingency(table, correction=False)[0]
        p, stat, _ = cmh_from_counts(present[:, None, None], sizes[:, None])
        n = sizes.sum()
        assert stat[0] == pytest.approx(chi * (n - 1) / n, rel=1e-9)
        assert p[0] == pytest.approx(stats.chi2.sf(chi * (n - 1) / n, 2), rel=1e-9)


def test_cmh_three_groups_reduces_to_two_when_a_group_is_absent():
    # a third group with no units anywhere changes nothing (pseudo-inverse path),
    # reference: statsmodels on the two remaining groups
    x = np.array([[[5], [2], [7]], [[1], [3], [2]], [[0], [0], [0]]])
    n = np.array([[8, 6, 9], [7, 8, 5], [0, 0, 0]])
    p3, stat3, _ = cmh_from_counts(x, n)
    ref = _statsmodels_cmh([[[x[0, k, 0], n[0, k] - x[0, k, 0]],
                             [x[1, k, 0], n[1, k] - x[1, k, 0]]] for k in range(3)])
    assert p3[0] == pytest.approx(ref, rel=1e-9)


def test_activity_strata_follow_the_documented_rule():
    rng = np.random.default_rng(0)
    for _ in range(30):
        v = rng.integers(1, 30, int(rng.integers(2, 60)))
        k = int(rng.integers(1, 8))
        got = activity_strata(v, k)
        assert got.tolist() == _brute_strata(v, k)
        for a, b in itertools.combinations(range(len(v)), 2):  # monotone, ties together
            if v[a] == v[b]:
                assert got[a] == got[b]
            elif v[a] < v[b]:
                assert got[a] <= got[b]
    assert activity_strata(np.arange(1000)).max() + 1 == 50      # automatic: at most 50
    assert activity_strata(np.arange(95)).max() + 1 == 9         # about ten per stratum
    with pytest.raises(ParameterError, match="'n_volume_strata' parameter of contrast"):
        activity_strata([1, 2], 0)


# ----------------------------------------------------------------- order test
def test_item_requirements_share_sets_between_orders():
    reqs, idx = item_requirements([(0, 1), (1, 0), (0, 0, 1), (2,), (0, 1, 0)])
    assert idx.tolist() == [0, 0, 1, -1, 1] and reqs == [((0, 1), (1, 1)), ((0, 2), (1, 1))]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 2), min_size=2, max_size=7), st.data())
def test_chance_index_is_the_mean_over_all_orders(seq, data):
    # Reference: enumerate every ordering of the unit's tokens and count overlapping
    # back-to-back occurrences.
    pat = tuple(data.draw(st.lists(st.sampled_from(seq), min_size=2, max_size=min(3, len(seq)))))
    counts = np.bincount(seq, minlength=3)
    got = chance_occurrences(sp.csr_matrix(counts[None, :]), [len(seq)], [pat])[0, 0]
    orders = list(itertools.permutations(seq))
    k = len(pat)
    mean = Fraction(sum(sum(o[i:i + k] == pat for i in range(len(o) - k + 1)) for o in orders),
                    len(orders))
    if _holds(seq, pat):
        assert got == pytest.approx(float(mean), rel=1e-9)
        assert mean == _chance(seq, pat)
    else:
        assert np.isnan(got)


def _small_db(rng, n_units, vocab=("a", "b", "c", "d")):
    seqs, groups = [], []
    for i in range(n_units):
        g = i % 2
        p = np.ones(len(vocab))
        p[int(rng.integers(len(vocab)))] += 1.5 * g
        seqs.append(list(rng.choice(list(vocab), size=int(rng.integers(3, 10)), p=p / p.sum())))
        groups.append(["strong", "weak"][g])
    return SequenceDB.from_lists(seqs, groups=groups, group_names=["strong", "weak"])


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 10_000), st.integers(10, 24), st.sampled_from([0, None]),
       st.integers(1, 4))
def test_order_and_volume_tests_equal_brute_force(seed, n_units, max_gap, n_strata):
    # Brute force: holders, exact chance index (fractions), bins and presence by loops;
    # per-bin tables into statsmodels' Mantel-Haenszel test.
    rng = np.random.default_rng(seed)
    db = _small_db(rng, n_units)
    ps = mine(db, min_support=1, min_length=1, max_length=3, max_gap=max_gap)
    table = contrast(ps, db, n_bootstrap=0, n_replication_splits=0, redundancy=None,
                     n_volume_strata=n_strata).set_index("pattern")
    seqs = [db.sequence(i).tolist() for i in range(db.n_sequences)]
    groups = db.groups.tolist()
    events = [len(s) for s in seqs]
    strata = _brute_strata(events, n_strata)
    n_bins = max(strata) + 1
    assert table.attrs["n_volume_strata"] == n_bins
    for pat, name in zip(ps.patterns, ps.names):
        row = table.loc[name]
        assert row["p_volume"] == pytest.approx(
            _brute_volume_p(seqs, groups, pat, strata, max_gap), rel=1e-9, abs=1e-12)
        if len(pat) < 2:
            assert np.isnan(row["p_order"])
            continue
        assert row["p_order"] == pytest.approx(
            _brute_order_p(seqs, groups, pat, n_bins, max_gap), rel=1e-9, abs=1e-12)


def test_learners_are_the_units_of_every_new_test():
    # two sessions per learner: the learner-level columns equal those computed on a
    # database where each learner's sessions are joined into one sequence (tokens,
    # events and presence in any session all add up the same way, for contiguous
    # patterns that do not cross the join)
    rng = np.random.default_rng(4)
    sessions, joined, groups, learners = [], [], [], []
    for k in range(24):
        g = ["strong", "weak"][k % 2]
        parts = [list(rng.choice(["a", "b", "c"], size=int(rng.integers(3, 7))))
                 for _ in range(2)]
        sessions += parts
        groups += [g, g]
        learners += [f"L{k}", f"L{k}"]
        joined.append(parts[0] + ["|"] + parts[1])
    db_s = SequenceDB.from_lists(sessions, groups=groups, group_names=["strong", "weak"],
                                 learners=learners, vocab=["a", "b", "c", "|"])
    db_j = SequenceDB.from_lists(joined, groups=groups[::2], group_names=["strong", "weak"],
                                 learners=learners[::2], vocab=["a", "b", "c", "|"],
                                 pause_tokens=["|"])
    ps_s = mine(db_s, min_support=1, min_length=1, max_length=2, max_gap=0)
    t_s = contrast(ps_s, db_s, n_bootstrap=0, n_replication_splits=5, redundancy=None)
    from seqmine.mining.miner import match
    ps_j = match(db_j, ps_s.patterns, max_gap=0, skip_pauses=False)
    # the joined database has the separator token: its lengths differ by one token,
    # which the order test's chance index sees, but events (actions) are equal
    t_j = contrast(ps_j, db_j, n_bootstrap=0, n_replication_splits=5, redundancy=None)
    cols = ["support_strong", "support_weak", "p_value", "p_volume", "q_volume"]
    a = t_s.set_index("pattern")[cols].sort_index()
    b = t_j.set_index("pattern").loc[a.index, cols]
    np.testing.assert_allclose(a.to_numpy(float), b.to_numpy(float), rtol=1e-12)
    assert t_s.attrs["unit"] == "learner" and t_s.attrs["n_sequences"] == 24


# ------------------------------------------------------------------ replication
def test_split_halves_are_balanced_and_seeded():
    labels = np.array([0] * 7 + [1] * 4)
    h = split_halves(labels, 6, random_state=3)
    assert (h[:, :7].sum(axis=1) == 4).all() and (h[:, 7:].sum(axis=1) == 2).all()
    np.testing.assert_array_equal(h, split_halves(labels, 6, random_state=3))
    assert not np.array_equal(h, split_halves(labels, 6, random_state=4))


def test_replication_equals_brute_force_halves():
    # per split and half: Fisher (scipy) for 'raw', statsmodels CMH for 'volume',
    # both with the full-data direction; replication = share of splits where both
    # halves pass
    rng = np.random.default_rng(8)
    n = 60
    labels = np.repeat([0, 1], 30)
    strata = rng.integers(0, 3, n)
    prob = np.where(labels[:, None] == 0, [0.8, 0.5, 0.3], [0.3, 0.5, 0.3])
    pres = (rng.random((n, 3)) < prob).astype(np.int8)
    tests = ["raw", "volume", "volume"]
    directions = [0, 0, 1]
    got = split_half_replication(sp.csr_matrix(pres), labels, 2, tests, directions,
                                 alpha=0.1, n_splits=12, random_state=2, strata=strata)
    halves = split_halves(labels, 12, 2)
    hits = np.zeros(3)
    for r in range(12):
        ok = np.ones(3, bool)
        for h in (0, 1):
            sel = halves[r] == h
            for j in range(3):
                a = np.sum(sel & (labels == 0) & (pres[:, j] == 1))
                b = np.sum(sel & (labels == 0)) - a
                c = np.sum(sel & (labels == 1) & (pres[:, j] == 1))
                d = np.sum(sel & (labels == 1)) - c
                if tests[j] == "raw":
                    p = stats.fisher_exact([[a, b], [c, d]]).pvalue
                    fav = 0 if a / (a + b) > c / (c + d) else 1
                else:
                    tabs = [[[np.sum(sel & (strata == s) & (labels == g) & (pres[:, j] == v))
                              for v in (1, 0)] for g in (0, 1)] for s in range(3)]
                    p = _statsmodels_cmh(tabs) or 1.0
                    full = StratifiedTable(np.dstack([np.array(t, float) for t in tabs]))
                    e = np.sum(full.table[0, 0] - full._apb * full._apc / full._n)
                    fav = 0 if e > 0 else 1
                ok[j] &= (p <= 0.1) & (fav == directions[j])
        hits += ok
    np.testing.assert_allclose(got, hits / 12)
    assert got[0] > 0.5 and got[2] == 0.0


def test_classify_evidence_levels_and_direction():
    ev, fav = classify_evidence(
        q_value=[0.01, 0.01, 0.01, 0.2, 0.01], q_volume=[0.01, 0.01, 0.3, 0.2, np.nan],
        q_order=[0.02, 0.4, np.nan, 0.01, 0.5], dir_raw=[0, 0, 1, 0, 1],
        dir_volume=[0, 0, 1, 0, 1], dir_order=[1, 0, -1, 0, 0], names=["strong", "weak"],
        alpha=0.05)
    assert ev.tolist() == ["order", "presence", "volume", "order", "volume"]
    assert fav.tolist() == ["weak", "strong", "weak", "strong", "weak"]


# ----------------------------------------------------- learner-level transitions
def test_learner_transition_tests_equal_scipy_per_learner():
    # Reference: each learner's share of a's transitions that go to b, computed by
    # loops over their sessions, into scipy.stats.ttest_ind(equal_var=False) (Welch's t
    # test; with three groups every pair, the smallest p times 3).

    rng = np.random.default_rng(9)
    for n_groups in (2, 3):
        names = ["strong", "weak", "middle"][:n_groups]
        seqs, groups, learners = [], [], []
        for k in range(30):
            for _ in range(int(rng.integers(1, 4))):
                seqs.append(list(rng.choice(["a", "b", "c", "pause:long"],
                                            size=int(rng.integers(2, 9)))))
                groups.append(names[k % n_groups])
                learners.append(f"L{k:02d}")
        db = SequenceDB.from_lists(seqs, groups=groups, group_names=names,
                                   learners=learners, pause_tokens=["pause:long"])
        pairs = np.array([(a, b) for a in range(len(db.vocab)) for b in range(len(db.vocab))])
        out = learner_transition_tests(db, pairs)
        lids = sorted(set(learners))
        for j, (a, b) in enumerate(pairs):
            shares = {g: [] for g in range(n_groups)}
            for lid in lids:
                x = r = 0
                g = None
                for i in range(db.n_sequences):
                    if db.learners[i] != lid:
                        continue
                    g = db.groups[i]
                    s = db.sequence(i).tolist()
                    r += sum(1 for t in s[:-1] if t == a)
                    x += sum(1 for t, u in zip(s, s[1:]) if t == a and u == b)
                if r:
                    shares[g].append(x / r)
            assert out["learners"][:, j].tolist() == [len(shares[g]) for g in range(n_groups)]
            samples = [np.array(shares[g]) for g in range(n_groups) if len(shares[g]) >= 2]
            got = out["p_learners"][j]
            if len(samples) < 2:
                assert np.isnan(got)
                continue
            pair_p = []
            for a, b in itertools.combinations(samples, 2):
                if a.var() == 0 and b.var() == 0:   # scipy: NaN (equal) or 0 (different)
                    pair_p.append(1.0 if abs(a.mean() - b.mean()) < 1e-12 else 0.0)
                else:
                    pair_p.append(stats.ttest_ind(a, b, equal_var=False).pvalue)
            ref = min(1.0, min(pair_p) * len(pair_p))
            assert got == pytest.approx(ref, rel=1e-8, abs=1e-14)


def test_transitions_table_labels_pooled_and_learner_columns():
    db = _small_db(np.random.default_rng(2), 20)
    t = transitions(db)
    assert {"learners", "learner_probability", "p_learners", "q_learners", "p_pooled",
            "q_pooled"} <= set(t.columns)
    assert (t["learners"] <= 10).all()
    strong = t[t.group == "strong"].reset_index(drop=True)
    weak = t[t.group == "weak"].reset_index(drop=True)
    np.testing.assert_array_equal(strong["p_learners"].to_numpy(), weak["p_learners"].to_numpy())


def test_order_replication_counts_each_half_like_a_labelling_of_its_own():
    # the half-1 tables are the whole data minus half 0; check against labelling both
    # halves explicitly (2 x groups labels), then the per-half CMH by statsmodels
    from seqmine.scoring.adjusted import order_tables

    rng = np.random.default_rng(12)
    db = _small_db(rng, 40)
    ps = mine(db, min_support=1, min_length=2, max_length=2, max_gap=0)
    tokens = sp.csr_matrix((np.ones(db.n_tokens), (db.seq_index, db.tokens.astype(int))),
                           shape=(db.n_sequences, len(db.vocab)))
    labels = db.groups
    strata = activity_strata(db.lengths, 3)
    n_s = int(strata.max()) + 1
    m = ps.n_patterns
    got = split_half_replication(ps.presence(), labels, 2, ["order"] * m, [0] * m,
                                 alpha=0.5, n_splits=6, random_state=4, strata=strata,
                                 token_counts=tokens, lengths=db.lengths, patterns=ps.patterns)
    halves = split_halves(labels, 6, 4)
    tabs = order_tables(ps.presence(), tokens, db.lengths, ps.patterns,
                        [(halves[r] * 2 + labels, 4) for r in range(6)], n_s)
    hits = np.zeros(m)
    for r, (x, n) in enumerate(tabs):
        ok = np.ones(m, bool)
        for h in (0, 1):
            for j in range(m):
                t = [[[x[h * 2 + g, b, j], n[h * 2 + g, b, j] - x[h * 2 + g, b, j]]
                      for g in (0, 1)] for b in range(n_s)]
                p = _statsmodels_cmh(t)
                full = [np.array(tt, float) for tt in t if np.sum(tt) >= 2]
                e = sum(tt[0, 0] - tt[0].sum() * tt[:, 0].sum() / tt.sum() for tt in full)
                ok[j] &= (p is not None and p <= 0.5) and e > 1e-9
        hits += ok
    np.testing.assert_allclose(got, hits / 6)
