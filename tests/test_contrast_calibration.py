"""Calibration on simulated data: family-wise and false-discovery rates stay at their level."""

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats

from seqmine.scoring.multitest import adjust_pvalues
from seqmine.scoring.permutation import presence_pvalues, westfall_young_minp

ALPHA = 0.05


def _overlapping_presence(rng, n_seq, n_base=12):
    """Presence of dependent patterns: base behaviours plus ANDs/ORs of pairs of them
    (longer patterns occur only where their parts occur), as mined patterns overlap."""
    base = rng.random((n_seq, n_base)) < rng.uniform(0.15, 0.7, n_base)
    cols = [base]
    for i in range(n_base - 1):
        cols.append((base[:, i] & base[:, i + 1])[:, None])
        cols.append((base[:, i] | base[:, i + 1])[:, None])
    return np.concatenate(cols, axis=1)


def _upper(n, p=ALPHA, q=0.999):
    """Largest count of hits compatible with rate p (binomial 99.9% quantile)."""
    return int(stats.binom.ppf(q, n, p))


@pytest.mark.slow
def test_westfall_young_controls_familywise_rate_under_null():
    # Null: group labels are unrelated to behaviour. Over S simulated data sets the
    # share with ANY pattern adjusted p <= 0.05 must stay at or below 0.05, within
    # the binomial 99.9% upper bound for S draws (tolerance stated: binom.ppf(0.999,
    # S, 0.05) hits). Uncorrected testing must clearly exceed it (the check can fail).
    n_sets, hits_wy, hits_raw = 500, 0, 0
    for s in range(n_sets):
        rng = np.random.default_rng(1000 + s)
        pres = _overlapping_presence(rng, 50)
        labels = rng.permutation(np.repeat([0, 1], 25))
        raw, adj = westfall_young_minp(sp.csr_matrix(pres.astype(np.int8)), labels,
                                       n_permutations=199, random_state=s)
        hits_wy += bool(np.any(adj <= ALPHA))
        hits_raw += bool(np.any(raw <= ALPHA))
    assert hits_wy <= _upper(n_sets)
    assert hits_raw > 2 * _upper(n_sets)


@pytest.mark.slow
def test_benjamini_hochberg_false_discovery_proportion_under_mixture():
    # 40 null patterns and 10 with a real difference; the mean false discovery
    # proportion over S data sets stays at or below q = 0.05 plus 3 standard errors.
    n_sets, n_null, n_true, fdp = 500, 40, 10, []
    holm_any_false = 0
    for s in range(n_sets):
        rng = np.random.default_rng(5000 + s)
        labels = np.repeat([0, 1], 40)
        prob = np.full((80, n_null + n_true), 0.3)
        prob[labels == 0, n_null:] = 0.75
        pres = rng.random(prob.shape) < prob
        p = presence_pvalues(sp.csr_matrix(pres.astype(np.int8)), labels)
        q = adjust_pvalues(p, "bh")
        rejected = q <= ALPHA
        false = rejected[:n_null].sum()
        fdp.append(false / max(rejected.sum(), 1))
        holm_any_false += bool(np.any(adjust_pvalues(p, "holm")[:n_null] <= ALPHA))
    fdp = np.array(fdp)
    assert fdp.mean() <= ALPHA + 3 * fdp.std(ddof=1) / np.sqrt(n_sets)
    # Holm controls the family-wise rate over the null patterns
    assert holm_any_false <= _upper(n_sets)


@pytest.mark.slow
def test_westfall_young_rates_controls_familywise_rate_under_null():
    # Same design as above for the rank test on rates (counts of overlapping patterns
    # per 100 tokens); tolerance: binomial 99.9% upper bound for S data sets.
    from seqmine.scoring.permutation import westfall_young_rates

    n_sets, hits = 300, 0
    for s in range(n_sets):
        rng = np.random.default_rng(9000 + s)
        pres = _overlapping_presence(rng, 50)
        counts = pres * rng.integers(1, 5, size=pres.shape)
        rates = sp.csr_matrix(counts / rng.integers(20, 60, size=(50, 1)) * 100)
        labels = rng.permutation(np.repeat([0, 1], 25))
        _, adj = westfall_young_rates(rates, labels, n_permutations=199, random_state=s)
        hits += bool(np.any(adj <= ALPHA))
    assert hits <= _upper(n_sets)
