"""Multiple-comparison corrections: Benjamini-Hochberg FDR, Holm and Westfall-Young FWER."""

from __future__ import annotations

import numpy as np

from .._util.checks import check_choice
from ..errors import ParameterError
from .permutation import westfall_young_minp, westfall_young_rates

__all__ = ["adjust_pvalues", "westfall_young_minp", "westfall_young_rates", "CORRECTIONS"]

#: Corrections :func:`adjust_pvalues` knows (Westfall-Young needs the data, not only
#: the p-values: see :func:`westfall_young_minp`).
CORRECTIONS = ("bh", "holm", "none")


def adjust_pvalues(pvalues, method="bh"):
    """Adjust p-values for multiple comparisons.

    Parameters
    ----------
    pvalues : array_like of float
        Raw p-values in [0, 1]. NaN entries (tests that could not be run) pass
        through as NaN and do not count towards the number of tests.
    method : {"bh", "holm", "none"}
        ``"bh"``: Benjamini-Hochberg step-up adjusted p-values (q-values), which
        control the false discovery rate under independence or positive dependence.
        ``"holm"``: Holm's step-down adjusted p-values, which control the
        family-wise error rate under any dependence. ``"none"``: a copy.

    Returns
    -------
    ndarray of float
        Adjusted p-values, same shape as ``pvalues``, each in [0, 1].

    Notes
    -----
    With ``m`` non-missing p-values sorted ascending, ``p(1) <= ... <= p(m)``:

    * BH: ``q(i) = min over j >= i of min(1, m * p(j) / j)``.
    * Holm: ``q(i) = max over j <= i of min(1, (m - j + 1) * p(j))``.

    References
    ----------
    Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate.
    JRSS B 57(1), 289-300. Holm, S. (1979). A simple sequentially rejective multiple
    test procedure. Scand. J. Statist. 6(2), 65-70.

    Examples
    --------
    >>> adjust_pvalues([0.01, 0.04, 0.03], "bh").round(4).tolist()
    [0.03, 0.04, 0.04]
    >>> adjust_pvalues([0.01, 0.04, 0.03], "holm").round(4).tolist()
    [0.03, 0.06, 0.06]
    """
    check_choice(method, "correction", CORRECTIONS, "adjust_pvalues")
    p = np.asarray(pvalues, dtype=np.float64)
    flat = p.reshape(-1)
    flat_out = np.full(flat.shape, np.nan)
    ok = ~np.isnan(flat)
    if np.any((flat[ok] < 0) | (flat[ok] > 1)):
        bad = flat[ok][(flat[ok] < 0) | (flat[ok] > 1)][0]
        raise ParameterError(f"p-values must lie in [0, 1]; got {float(bad)!r}.")
    vals = flat[ok]
    m = len(vals)
    if method == "none" or m == 0:
        flat_out[ok] = vals
        return flat_out.reshape(p.shape)
    order = np.argsort(vals, kind="stable")
    sorted_p = vals[order]
    ranks = np.arange(1, m + 1, dtype=np.float64)
    if method == "bh":
        adj = np.minimum.accumulate((m * sorted_p / ranks)[::-1])[::-1]
    else:  # holm
        adj = np.maximum.accumulate((m - ranks + 1) * sorted_p)
    adj = np.minimum(adj, 1.0)
    res = np.empty(m)
    res[order] = adj
    flat_out[ok] = res
    return flat_out.reshape(p.shape)
