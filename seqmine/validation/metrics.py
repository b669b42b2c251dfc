"""Classification metrics with paired bootstrap intervals and the test against a baseline.

Accuracy, balanced accuracy, per-group recall and ROC AUC are computed for many
bootstrap resamples at once from resampling multiplicities (weights), which gives the
same numbers as scikit-learn on the resampled rows (checked in the tests).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import binomtest

from ..config import DEFAULT_CONFIG
from ..errors import ParameterError

__all__ = ["early_prediction_table"]


def early_prediction_table(predictions, group_names, *,
                           n_bootstrap=DEFAULT_CONFIG["validate"]["n_bootstrap"],
                           confidence=0.95, alpha=DEFAULT_CONFIG["contrast"]["alpha"],
                           random_state=DEFAULT_CONFIG["seed"]):
    """Metrics per classifier x fraction with bootstrap intervals and the baseline test.

    Parameters
    ----------
    predictions : pandas.DataFrame
        Columns ``classifier``, ``fraction``, ``learner``, ``group``,
        ``predicted`` and ``proba_<group>`` for every group; must contain the
        ``majority`` classifier, and every classifier x fraction must cover the same
        learners.
    group_names : list of str
    n_bootstrap : int
        Resamples (with replacement) of the held-out learners; the same resamples
        are used for every classifier and fraction (paired).
    confidence : float
        Percentile interval level.
    alpha : float
        Level of the test against the majority baseline.
    random_state : int

    Returns
    -------
    pandas.DataFrame
        ``classifier``, ``fraction``, ``n_learners``, then ``accuracy``,
        ``balanced_accuracy``, ``recall_<group>`` for each group and ``roc_auc``,
        each followed by ``<metric>_low`` and ``<metric>_high``; then
        ``baseline_accuracy``, ``n_only_classifier_right``,
        ``n_only_baseline_right``, ``p_value``, ``beats_baseline``.

    Notes
    -----
    ``roc_auc`` scores the probability of ``group_names[1]`` for two groups
    (one-vs-rest macro average for more), as :func:`sklearn.metrics.roc_auc_score`.
    ``balanced_accuracy`` is the mean recall over the groups present. Intervals
    are bootstrap percentile intervals over held-out learners pooled across folds
    (the fold models are held fixed); a resample in which a metric is undefined
    (e.g. one group absent, for its recall or the AUC) is left out of that metric's
    interval.

    The classifier *beats the baseline* at a fraction when the one-sided exact
    McNemar test on paired correctness rejects at ``alpha``: with ``b`` learners
    classified correctly only by the classifier and ``c`` only by the majority
    baseline, ``p = P(X >= b)`` for ``X ~ Binomial(b + c, 1/2)`` (McNemar 1947;
    recommended for comparing two classifiers on one test set by Dietterich 1998).
    The tests at different fractions are not corrected for multiplicity; the
    earliest fraction is the smallest fraction that rejects.

    References
    ----------
    .. [1] McNemar, Q. (1947). Note on the sampling error of the difference between
       correlated proportions or percentages. Psychometrika 12(2), 153-157.
    .. [2] Dietterich, T. G. (1998). Approximate statistical tests for comparing
       supervised classification learning algorithms. Neural Computation 10(7).
    .. [3] Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap
       (percentile intervals).
    """
    group_names = list(group_names)
    k = len(group_names)
    pos = {g: i for i, g in enumerate(group_names)}
    preds = predictions.sort_values(["classifier", "fraction", "learner"], kind="mergesort")
    cells = {key: part for key, part in preds.groupby(["classifier", "fraction"], sort=False)}
    classifiers = list(dict.fromkeys(predictions["classifier"]))
    if "majority" not in classifiers:
        raise ParameterError("predictions need the 'majority' classifier as the baseline.")
    fractions = sorted(set(predictions["fraction"]))
    first = cells[(classifiers[0], fractions[0])]
    learners = first["learner"].to_numpy()
    n = len(learners)
    rng = np.random.default_rng(random_state)
    boot = rng.integers(0, n, size=(n_bootstrap, n))
    weights = _bootstrap_weights(boot, n)
    q = (1 - confidence) / 2
    rows = []
    for frac in fractions:
        base = cells[("majority", frac)]
        y = base["group"].map(pos).to_numpy(dtype=np.int64)
        base_right = base["predicted"].map(pos).to_numpy() == y
        for name in classifiers:
            part = cells[(name, frac)]
            if not np.array_equal(part["learner"].to_numpy(), learners):
                raise ParameterError(
                    f"Classifier {name!r} at fraction {frac} covers other learners than "
                    f"{classifiers[0]!r}; every cell must cover the same held-out learners.")
            pred = part["predicted"].map(pos).to_numpy(dtype=np.int64)
            proba = part[[f"proba_{g}" for g in group_names]].to_numpy(dtype=float)
            point = _metrics(y, pred, proba, np.ones((1, n)), k)
            boots = _metrics(y, pred, proba, weights, k)
            row = {"classifier": name, "fraction": float(frac), "n_learners": n}
            for key in point:
                col = _metric_column(key, group_names)
                row[col] = float(point[key][0])
                vals = boots[key]
                vals = vals[np.isfinite(vals)]
                if len(vals):
                    row[f"{col}_low"] = float(np.quantile(vals, q))
                    row[f"{col}_high"] = float(np.quantile(vals, 1 - q))
                else:
                    row[f"{col}_low"] = row[f"{col}_high"] = float("nan")
            right = pred == y
            b = int(np.sum(right & ~base_right))
            c = int(np.sum(~right & base_right))
            p = float(binomtest(b, b + c, 0.5, alternative="greater").pvalue) if b + c else 1.0
            row.update(baseline_accuracy=float(base_right.mean()),
                       n_only_classifier_right=b, n_only_baseline_right=c, p_value=p,
                       beats_baseline=bool(p < alpha) and name != "majority")
            rows.append(row)
    table = pd.DataFrame(rows)
    metric_cols = []
    for key in ["accuracy", "balanced_accuracy"] + [f"recall_{g}" for g in group_names] + [
            "roc_auc"]:
        metric_cols += [key, f"{key}_low", f"{key}_high"]
    cols = (["classifier", "fraction", "n_learners"] + metric_cols
            + ["baseline_accuracy", "n_only_classifier_right", "n_only_baseline_right",
               "p_value", "beats_baseline"])
    return table[cols]


def _metric_column(key, group_names):
    if key.startswith("recall_"):
        return f"recall_{group_names[int(key[7:])]}"
    return key


def _metrics(y, pred, proba, weights, k):
    """Weighted metrics; ``weights`` (B, n) are bootstrap multiplicities (1 = point)."""
    right = (pred == y).astype(float)
    tot = weights.sum(axis=1)
    out = {"accuracy": weights @ right / tot}
    recalls = []
    for g in range(k):
        in_g = (y == g).astype(float)
        n_g = weights @ in_g
        with np.errstate(invalid="ignore", divide="ignore"):
            r = np.where(n_g > 0, (weights @ (right * in_g)) / n_g, np.nan)
        recalls.append(r)
        out[f"recall_{g}"] = r
    rec = np.vstack(recalls)
    present = np.isfinite(rec)
    with np.errstate(invalid="ignore", divide="ignore"):
        out["balanced_accuracy"] = np.where(present.any(axis=0),
                                            np.nansum(rec, axis=0) / present.sum(axis=0), np.nan)
    if k == 2:
        out["roc_auc"] = _weighted_auc(y == 1, proba[:, 1], weights)
    else:
        aucs = np.vstack([_weighted_auc(y == g, proba[:, g], weights) for g in range(k)])
        out["roc_auc"] = aucs.mean(axis=0)
    return {key: np.asarray(out[key], dtype=float) for key in
            ["accuracy", "balanced_accuracy"] + [f"recall_{g}" for g in range(k)] + ["roc_auc"]}


def _weighted_auc(positive, score, weights):
    """ROC AUC with sample multiplicities: P(s+ > s-) + P(s+ = s-) / 2, per row of weights.

    Equals :func:`sklearn.metrics.roc_auc_score` on the resampled data (the
    Mann-Whitney form of the area, Hanley & McNeil 1982); NaN when a class is absent.
    """
    order = np.argsort(score, kind="mergesort")
    s = score[order]
    pos = positive[order].astype(float)
    w = weights[:, order]
    starts = np.flatnonzero(np.concatenate([[True], s[1:] != s[:-1]]))
    wp = np.add.reduceat(w * pos, starts, axis=1)
    wn = np.add.reduceat(w * (1 - pos), starts, axis=1)
    below = np.cumsum(wn, axis=1) - wn
    num = np.sum(wp * (below + 0.5 * wn), axis=1)
    den = wp.sum(axis=1) * wn.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def _bootstrap_weights(boot, n):
    b = boot.shape[0]
    flat = (boot + (np.arange(b) * n)[:, None]).ravel()
    return np.bincount(flat, minlength=b * n).reshape(b, n).astype(float)
