"""Vectorised tests and effect sizes checked against scipy, statsmodels and worked tables."""

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from seqmine.scoring.effects import (
    chi2_presence,
    cohens_h,
    fisher_exact_many,
    fisher_table,
    growth_rate,
    kruskal_sparse,
    mannwhitney_sparse,
    odds_ratio_haldane,
)


# ----------------------------------------------------------------- Fisher exact
def test_fisher_tea_tasting():
    # Fisher (1935), The Design of Experiments, ch. II, the lady tasting tea: of the
    # C(8, 4) = 70 ways to pick 4 cups, 1 gets all right and 16 get three right, so
    # [[3, 1], [1, 3]] has two-sided p = 34/70 = 17/35 and [[4, 0], [0, 4]] 2/70
    # (computed by hand from these counts).
    assert fisher_exact_many(3, 1, 1, 3) == pytest.approx(17 / 35, rel=1e-12)
    assert fisher_exact_many(4, 0, 0, 4) == pytest.approx(2 / 70, rel=1e-12)


def test_fisher_scipy_doc_tables():
    # scipy.stats.fisher_exact documentation tables (from memory, recomputed with scipy).
    p = fisher_exact_many([8, 6], [2, 2], [1, 1], [5, 4])
    np.testing.assert_allclose(p, [0.034965034965, 0.102564102564], rtol=1e-9)


def test_fisher_many_random_tables_match_scipy():
    # Reference: scipy.stats.fisher_exact, one table at a time.
    rng = np.random.default_rng(11)
    small = rng.integers(0, 25, size=(1500, 4))
    big = rng.integers(0, 900, size=(150, 4))
    sym = np.array([[a, b, b, a] for a in range(0, 12) for b in range(0, 12)])
    mirror = np.array([[a, b, a, b] for a in range(0, 9) for b in range(0, 9)])
    for tables in (small, big, sym, mirror):
        p = fisher_exact_many(*tables.T)
        ref = np.array([stats.fisher_exact(t.reshape(2, 2)).pvalue for t in tables])
        np.testing.assert_allclose(p, ref, rtol=1e-8, atol=1e-300)


@settings(max_examples=80, deadline=None)
@given(st.lists(st.integers(0, 40), min_size=4, max_size=4))
def test_fisher_property_matches_scipy(cells):
    a, b, c, d = cells
    ref = stats.fisher_exact([[a, b], [c, d]]).pvalue
    assert fisher_exact_many(a, b, c, d) == pytest.approx(ref, rel=1e-8, abs=1e-300)


def test_fisher_table_is_a_distribution_of_pvalues():
    lo, table = fisher_table(20, 8, 9)
    assert lo == 0 and len(table) == 9
    # The p-value of the most likely outcome is 1 and every value is in (0, 1].
    assert table.max() == pytest.approx(1.0)
    assert np.all((table > 0) & (table <= 1))


def test_fisher_empty_margin_gives_one():
    # scipy returns p = 1 when a row or column is empty.
    assert fisher_exact_many(0, 0, 3, 4) == 1.0
    assert fisher_exact_many(0, 5, 0, 4) == 1.0


# ---------------------------------------------------------------- effect sizes
def test_odds_ratio_scipy_doc_values_and_haldane():
    # Sample odds ratios of the scipy documentation tables: 20.0 and 12.0 (from memory).
    np.testing.assert_allclose(odds_ratio_haldane([8, 6], [2, 2], [1, 1], [5, 4]), [20.0, 12.0])
    # Tea tasting table of Fisher (1935), [[3, 1], [1, 3]]: sample OR = 3*3 / (1*1) = 9.0.
    assert odds_ratio_haldane(3, 1, 1, 3) == pytest.approx(9.0)
    # Haldane-Anscombe: a zero cell adds 0.5 to every cell of that table only.
    assert odds_ratio_haldane(5, 0, 2, 3) == pytest.approx(5.5 * 3.5 / (0.5 * 2.5))


def test_cohens_h_formula():
    # Cohen (1988): h = 2 asin(sqrt p1) - 2 asin(sqrt p2).
    p1, p2 = np.array([0.1, 0.5, 0.9]), np.array([0.3, 0.5, 0.2])
    expected = [2 * np.arcsin(np.sqrt(x)) - 2 * np.arcsin(np.sqrt(y)) for x, y in zip(p1, p2)]
    np.testing.assert_allclose(cohens_h(p1, p2), expected, rtol=1e-14)
    assert cohens_h(1.0, 0.0) == pytest.approx(np.pi)


def test_growth_rate_edge_cases():
    np.testing.assert_array_equal(growth_rate([0.4, 0.3, 0], [0.2, 0, 0]), [2.0, np.inf, np.nan])


# ---------------------------------------------------------------- Mann-Whitney
def test_mannwhitney_shier_example():
    # Shier (2004), "Statistics: 2.3 The Mann-Whitney U Test", Mathematics Learning
    # Support Centre, as used in the scipy.stats.mannwhitneyu documentation Examples:
    # ages at diagnosis [19, 22, 16, 29, 24] (men) and [20, 11, 17, 12] (women) give
    # U_M = 17 and p = 0.11; the exact two-sided p is 1/9 (scipy's value there).
    x = np.array([19, 22, 16, 29, 24, 20, 11, 17, 12], float)[:, None]
    u, p = mannwhitney_sparse(sp.csc_matrix(x), [True] * 5 + [False] * 4)
    assert u[0] == 17.0
    assert p[0] == pytest.approx(0.1111111, abs=1e-7)


@pytest.mark.parametrize("n_rows,n_first,density", [(60, 25, 0.3), (12, 4, 0.6), (9, 3, 1.0),
                                                      (30, 15, 0.05)])
def test_mannwhitney_equals_scipy_per_column(n_rows, n_first, density):
    # Reference: scipy.stats.mannwhitneyu (method="auto") called column by column;
    # rounded values create ties, density 1.0 with distinct values hits the exact branch.
    rng = np.random.default_rng(n_rows)
    x = sp.random(n_rows, 80, density=density, random_state=rng, format="csc")
    if density < 1:
        x.data = np.round(x.data * 6) / 2 + 0.5
    first = np.zeros(n_rows, bool)
    first[rng.choice(n_rows, n_first, replace=False)] = True
    u, p = mannwhitney_sparse(x, first)
    dense = x.toarray()
    for j in range(dense.shape[1]):
        ref = stats.mannwhitneyu(dense[first, j], dense[~first, j])
        assert u[j] == ref.statistic
        assert p[j] == pytest.approx(ref.pvalue, rel=1e-13, abs=1e-300), j


def test_mannwhitney_all_zero_column_gives_one():
    u, p = mannwhitney_sparse(sp.csc_matrix((10, 2)), [True] * 5 + [False] * 5)
    np.testing.assert_array_equal(p, [1.0, 1.0])
    np.testing.assert_array_equal(u, [12.5, 12.5])


def test_kruskal_equals_scipy():
    # Reference: scipy.stats.kruskal per column.
    rng = np.random.default_rng(3)
    labels = rng.integers(0, 3, 50)
    x = sp.random(50, 60, density=0.3, random_state=rng, format="csc")
    x.data = np.round(x.data * 4) + 1
    h, p = kruskal_sparse(x, labels, 3)
    dense = x.toarray()
    for j in range(60):
        ref = stats.kruskal(*[dense[labels == g, j] for g in range(3)])
        assert h[j] == pytest.approx(ref.statistic, rel=1e-12)
        assert p[j] == pytest.approx(ref.pvalue, rel=1e-10)
    # all-equal column: no evidence (scipy gives NaN; we document 1.0)
    h0, p0 = kruskal_sparse(sp.csc_matrix((9, 1)), [0, 1, 2] * 3, 3)
    assert h0[0] == 0.0 and p0[0] == 1.0


def test_chi2_presence_equals_scipy_contingency():
    # Reference: scipy.stats.chi2_contingency(correction=False) on (groups x present/absent).
    rng = np.random.default_rng(5)
    sizes = np.array([20, 31, 17])
    present = np.stack([rng.integers(1, s, 40) for s in sizes])
    chi, p = chi2_presence(present, sizes)
    for j in range(40):
        table = np.stack([present[:, j], sizes - present[:, j]], axis=1)
        ref = stats.chi2_contingency(table, correction=False)
        assert chi[j] == pytest.approx(ref.statistic, rel=1e-12)
        assert p[j] == pytest.approx(ref.pvalue, rel=1e-10)
    chi, p = chi2_presence(np.array([[20], [31], [17]]), sizes)
    assert p[0] == 1.0 and chi[0] == 0.0


@settings(max_examples=60, deadline=None)
@given(st.integers(4, 20), st.integers(1, 6), st.integers(0, 10_000))
def test_mannwhitney_property_matches_scipy(n_rows, n_cols, seed):
    # Brute-force reference: scipy.stats.mannwhitneyu on each dense column.
    rng = np.random.default_rng(seed)
    dense = rng.integers(0, 4, size=(n_rows, n_cols)).astype(float)
    first = np.zeros(n_rows, bool)
    first[: rng.integers(1, n_rows)] = True
    rng.shuffle(first)
    u, p = mannwhitney_sparse(sp.csc_matrix(dense), first)
    for j in range(n_cols):
        ref = stats.mannwhitneyu(dense[first, j], dense[~first, j])
        assert u[j] == ref.statistic
        assert p[j] == pytest.approx(ref.pvalue, rel=1e-12, abs=1e-300)
