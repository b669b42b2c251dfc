"""Tests of lag sequential analysis against statsmodels, worked tables and brute force."""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.contingency_tables import Table

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import ParameterError
from seqmine.scoring.transitions import (
    TRANSITION_COLUMNS,
    adjusted_residuals,
    quasi_independence_expected,
    transition_counts,
    transitions,
    yules_q,
)


def test_adjusted_residuals_agresti_worked_table():
    # Agresti (2007), An Introduction to Categorical Data Analysis, 2nd ed., section 2.4,
    # party identification by gender (table and residuals from memory; the residuals
    # equal statsmodels Table.standardized_resids): row 1 +2.2932, +0.4648, -2.6178;
    # row 2 negated.
    z = adjusted_residuals([[279, 73, 225], [165, 47, 191]])
    np.testing.assert_allclose(z[0], [2.2932, 0.4648, -2.6178], atol=5e-5)
    np.testing.assert_allclose(z[1], -z[0], atol=1e-12)


def test_adjusted_residuals_equal_statsmodels_on_random_tables():
    # Reference: statsmodels Table(M).standardized_resids.
    rng = np.random.default_rng(0)
    for _ in range(20):
        m = rng.integers(1, 40, size=rng.integers(2, 7, size=2))
        np.testing.assert_allclose(adjusted_residuals(m), Table(m).standardized_resids,
                                   rtol=1e-12, atol=1e-12)


def test_yules_q_worked_tables():
    # Yule (1900): Q = (ad - bc)/(ad + bc) = (OR - 1)/(OR + 1). Computed by hand from the
    # odds ratios 9, 20 and 33: 8/10, 19/21 = 0.904762, 32/34 = 0.941176.
    np.testing.assert_allclose(yules_q([3, 8, 30], [1, 2, 10], [1, 1, 5], [3, 5, 55]),
                               [0.8, 0.904762, 0.941176], atol=5e-7)
    assert np.isnan(yules_q(0, 0, 3, 4))


def test_quasi_independence_equals_poisson_glm_fit():
    # Reference: quasi-independence MLE = Poisson log-linear model with row and column
    # effects on the allowed cells (statsmodels GLM), Bishop, Fienberg & Holland ch. 5.
    rng = np.random.default_rng(3)
    x = rng.integers(1, 30, size=(5, 5)).astype(float)
    allowed = ~np.eye(5, dtype=bool)
    allowed[0, 3] = False
    x[~allowed] = 0
    e = quasi_independence_expected(x, allowed)
    i, j = np.nonzero(allowed)
    design = np.column_stack([np.ones(len(i))]
                             + [(i == k).astype(float) for k in range(1, 5)]
                             + [(j == k).astype(float) for k in range(1, 5)])
    fit = sm.GLM(x[i, j], design, family=sm.families.Poisson()).fit(tol=1e-12)
    np.testing.assert_allclose(e[i, j], fit.fittedvalues, rtol=1e-6)
    assert np.all(e[~allowed] == 0)
    # without structural zeros IPF reproduces r c / N
    full = quasi_independence_expected(x + 1, np.ones((5, 5), bool))
    np.testing.assert_allclose(full, np.outer((x + 1).sum(1), (x + 1).sum(0)) / (x + 1).sum(),
                               rtol=1e-9)


def _brute_counts(db, exclude_pauses=False):
    out = {}
    for i in range(db.n_sequences):
        seq = [t for t in db.decode(i) if not (exclude_pauses and t.startswith("pause:"))]
        g = db.group_names[db.groups[i]]
        for a, b in zip(seq, seq[1:]):
            out[(g, a, b)] = out.get((g, a, b), 0) + 1
    return out


def _demo_db():
    rng = np.random.default_rng(4)
    acts = ["set_light", "advance_week", "measure_height", "reset", "pause:long"]
    seqs, groups = [], []
    for k in range(30):
        g = ["strong", "weak"][k % 2]
        p = np.array([1, 1, 3 if g == "strong" else 1, 1 if g == "strong" else 3, 1.0])
        seqs.append(list(rng.choice(acts, size=int(rng.integers(3, 12)), p=p / p.sum())))
        groups.append(g)
    return SequenceDB.from_lists(seqs, groups=groups, group_names=["strong", "weak"],
                                 pause_tokens=["pause:long"], vocab=acts)


@pytest.mark.parametrize("exclude", [False, True])
def test_counts_and_table_equal_brute_force(exclude):
    db = _demo_db()
    t = transitions(db, exclude_pauses=exclude, structural_zeros="none")
    assert list(t.columns) == TRANSITION_COLUMNS
    brute = _brute_counts(db, exclude)
    got = {(g, a, b): c for g, a, b, c in t[["group", "from", "to", "count"]].itertuples(
        index=False) if c > 0}
    assert got == brute
    if exclude:
        assert not t["from"].str.startswith("pause:").any()
    counts, names = transition_counts(db, exclude_pauses=exclude)
    for g, name in enumerate(names):
        sub = t[t.group == name]
        m = counts[g]
        keep = m.sum(1) > 0
        keepc = m.sum(0) > 0
        ref = Table(m[keep][:, keepc], shift_zeros=False).standardized_resids
        ids = {v: k for k, v in enumerate(db.vocab)}
        ri = {k: n for n, k in enumerate(np.flatnonzero(keep))}
        ci = {k: n for n, k in enumerate(np.flatnonzero(keepc))}
        for row in sub.itertuples(index=False):
            a, b = ids[row[1]], ids[row[2]]
            if a in ri and b in ci:
                assert row.adjusted_residual == pytest.approx(ref[ri[a], ci[b]], rel=1e-9,
                                                              abs=1e-12)
            assert row.probability == pytest.approx(m[a, b] / m[a].sum())
            x, r, c, n = m[a, b], m[a].sum(), m[:, b].sum(), m.sum()
            q = yules_q(x, r - x, c - x, n - r - c + x)
            assert row.yules_q == pytest.approx(q, nan_ok=True)


def test_group_pooled_is_fisher_on_to_b_versus_other():
    db = _demo_db()
    t = transitions(db, structural_zeros="none")
    counts, _ = transition_counts(db)
    ids = {v: k for k, v in enumerate(db.vocab)}
    ref_p = []
    for row in t[t.group == "strong"].itertuples(index=False):
        a, b = ids[row[1]], ids[row[2]]
        x0, x1 = counts[0, a, b], counts[1, a, b]
        r0, r1 = counts[0, a].sum(), counts[1, a].sum()
        p = stats.fisher_exact([[x0, r0 - x0], [x1, r1 - x1]]).pvalue  # scipy reference
        assert row.p_pooled == pytest.approx(p, rel=1e-8)
        ref_p.append(p)
    from statsmodels.stats.multitest import multipletests
    np.testing.assert_allclose(t[t.group == "strong"]["q_pooled"],
                               multipletests(ref_p, method="fdr_bh")[1], rtol=1e-9)
    # the two group rows of a transition carry the same test
    np.testing.assert_array_equal(t[t.group == "strong"]["p_pooled"].to_numpy(),
                                  t[t.group == "weak"]["p_pooled"].to_numpy())


def test_structural_zeros_with_collapsed_repeats():
    db = SequenceDB.from_lists([["a", "p", "b", "c", "a"], ["b", "a", "p", "c"], ["c", "b", "a"]],
                               groups=["x", "y", "x"], pause_tokens=["p"])
    db.encoding = {"collapse_repeats": True}
    t = transitions(db)
    counts, _ = transition_counts(db)
    for g, name in enumerate(["x", "y"]):
        allowed = ~np.eye(4, dtype=bool) | (counts.sum(0) > 0)
        allowed[3, 3] = False  # p -> p
        e = quasi_independence_expected(counts[g], allowed)
        sub = t[t.group == name]
        ids = {v: k for k, v in enumerate(db.vocab)}
        got = [e[ids[a], ids[b]] for a, b in zip(sub["from"], sub["to"])]
        np.testing.assert_allclose(sub["expected"], got)
    # no diagonal cell was listed, and expected counts keep the row sums of allowed cells
    assert not (t["from"] == t["to"]).any()


def test_no_groups_and_single_group():
    db = SequenceDB.from_lists([["a", "b", "a"], ["b", "b"]])
    t = transitions(db)
    assert set(t["group"]) == {"all"} and t["p_pooled"].isna().all()
    assert t["count"].sum() == 3


def test_bad_options():
    db = SequenceDB.from_lists([["a", "b"]])
    with pytest.raises(ParameterError, match="'structural_zeros' parameter of transitions"):
        transitions(db, structural_zeros="diag")
    with pytest.raises(ParameterError, match=r"must have shape \(2, 2\)"):
        transitions(db, structural_zeros=np.zeros((3, 3), bool))
    with pytest.raises(ParameterError, match="'correction' parameter of transitions"):
        transitions(db, correction="westfall-young")


def test_empty_database():
    db = SequenceDB.from_lists([["a"], []], groups=["x", "y"])
    t = transitions(db)
    assert len(t) == 0 and list(t.columns) == TRANSITION_COLUMNS
