"""Tests of Benjamini-Hochberg and Holm adjusted p-values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests

from seqmine.errors import ParameterError
from seqmine.scoring.multitest import adjust_pvalues

# The 15 p-values of Benjamini & Hochberg (1995), JRSS B 57(1), section 4.
BH1995 = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
          0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000]


def test_bh_paper_example_rejects_four():
    # Benjamini & Hochberg (1995): BH at 0.05 rejects the 4 smallest.
    q = adjust_pvalues(BH1995, "bh")
    assert int((q <= 0.05).sum()) == 4
    # Adjusted values computed with statsmodels multipletests(method="fdr_bh").
    expected = [0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.063857, 0.063857, 0.0645,
                0.0765, 0.486, 0.581182, 0.714875, 0.753231, 0.813214, 1.0]
    np.testing.assert_allclose(q, expected, atol=5e-7)


def test_holm_paper_example_rejects_three():
    # Holm (1979) step-down on the BH (1995) p-values rejects 3; adjusted values
    # computed with statsmodels multipletests(method="holm").
    q = adjust_pvalues(BH1995, "holm")
    assert int((q <= 0.05).sum()) == 3
    expected = [0.0015, 0.0056, 0.0247, 0.114, 0.2211, 0.278, 0.278, 0.278, 0.3213] + [1.0] * 6
    np.testing.assert_allclose(q, expected, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0, 1), min_size=1, max_size=40), st.sampled_from(["bh", "holm"]))
def test_matches_statsmodels(pvals, method):
    # Reference: statsmodels.stats.multitest.multipletests (fdr_bh / holm).
    sm = {"bh": "fdr_bh", "holm": "holm"}[method]
    ref = multipletests(pvals, method=sm)[1]
    np.testing.assert_allclose(adjust_pvalues(pvals, method), ref, rtol=1e-12, atol=1e-15)


def test_ties_and_shape_kept():
    p = np.array([[0.01, 0.01], [0.02, 0.5]])
    q = adjust_pvalues(p, "bh")
    assert q.shape == (2, 2)
    np.testing.assert_allclose(q.ravel(), multipletests(p.ravel(), method="fdr_bh")[1])


def test_nan_passes_through_and_is_not_counted():
    q = adjust_pvalues([0.01, np.nan, 0.04], "bh")
    assert np.isnan(q[1])
    np.testing.assert_allclose(q[[0, 2]], multipletests([0.01, 0.04], method="fdr_bh")[1])
    assert adjust_pvalues([], "holm").shape == (0,)


def test_bad_input_messages():
    with pytest.raises(ParameterError, match=r"p-values must lie in \[0, 1\]; got 1.5"):
        adjust_pvalues([0.2, 1.5])
    with pytest.raises(ParameterError,
                       match="'correction' parameter of adjust_pvalues must be one of"):
        adjust_pvalues([0.2], "bonferroni-ish")
