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

__all__ = ["early_prediction_table", "metric_names"]


def early_prediction_table(predictions, group_names, *,
                           n_bootstrap=DEFAULT_CONFIG["validate"]["n_bootstrap"],
                           confidence=0.95, alpha=DEFAULT_CONFIG["contrast"]["alpha"],
                           random_state=DEFAULT_CONFIG["seed"]):
    """Metrics per classifier x fraction with bootstrap intervals and the baseline test.

    Parameters
    ----------
    predictions : pandas.DataFrame
        Columns ``classifier``, ``fraction``, ``learner``, ``group``,
        ``predicted`` and ``proba_<group>`` for every group, and optionally
        ``repeat`` (the repetition of the cross-validation; absent = one). Must
        contain the ``majority`` classifier in every repetition any other classifier
        has, and every classifier x fraction x repetition must cover the same
        learners.
    group_names : list of str
    n_bootstrap : int
        Resamples (with replacement) of the held-out learners; the same resamples
        are used for every classifier, fraction and repetition (paired).
    confidence : float
        Percentile interval level.
    alpha : float
        Level of the test against the majority baseline.
    random_state : int

    Returns
    -------
    pandas.DataFrame
        ``classifier``, ``fraction``, ``n_learners``, ``n_repeats``, then
        ``accuracy``, ``balanced_accuracy``, ``recall_<group>`` for each group and
        ``roc_auc``, each followed by ``<metric>_low`` and ``<metric>_high`` (bootstrap
        interval) and ``<metric>_min`` and ``<metric>_max`` (lowest and highest value
        over the repetitions); then ``baseline_accuracy``, ``n_classifier_better``,
        ``n_baseline_better``, ``p_value``, ``beats_baseline``.

    Notes
    -----
    A metric is computed in each repetition on all held-out learners and averaged
    over the repetitions; ``_min`` and ``_max`` show how much it moves when the
    learners are dealt into other folds. ``roc_auc`` scores the probability of
    ``group_names[1]`` for two groups (one-vs-rest macro average for more), as
    :func:`sklearn.metrics.roc_auc_score`. ``balanced_accuracy`` is the mean recall
    over the groups present. Intervals are bootstrap percentile intervals over the
    held-out learners (the fold models are held fixed): each resample of learners
    is applied to every repetition and the repetition mean is recomputed; a
    resample in which a metric is undefined (e.g. one group absent, for its recall
    or the AUC) is left out of that metric's interval.

    The classifier *beats the baseline* at a fraction when a one-sided sign test on
    paired per-learner correctness rejects at ``alpha``. For each learner the share
    of repetitions in which the classifier was right is compared with the share in
    which the majority baseline was right (in the same repetitions); ``b`` learners
    (``n_classifier_better``) have the higher share with the classifier and ``c``
    (``n_baseline_better``) with the baseline, ties are dropped, and
    ``p = P(X >= b)`` for ``X ~ Binomial(b + c, 1/2)`` (the sign test, Dixon & Mood
    1946). With one repetition ``b`` and ``c`` are the discordant pairs and the test
    is the exact McNemar test (McNemar 1947), recommended for comparing two
    classifiers on one test set by Dietterich (1998). The tests at different
    fractions are not corrected for multiplicity; the earliest fraction is the
    smallest fraction that rejects.

    References
    ----------
    .. [1] McNemar, Q. (1947). Note on the sampling error of the difference between
       correlated proportions or percentages. Psychometrika 12(2), 153-157.
    .. [2] Dixon, W. J., & Mood, A. M. (1946). The statistical sign test. Journal of
       the American Statistical Association 41(236), 557-566.
    .. [3] Dietterich, T. G. (1998). Approximate statistical tests for comparing
       supervised classification learning algorithms. Neural Computation 10(7).
    .. [4] Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap
       (percentile intervals).

    Examples
    --------
    >>> import pandas as pd
    >>> rows = [("m", r, lr, g, p) for r in (0, 1) for lr, g, p in
    ...         [("a", "x", "x"), ("b", "y", "y"), ("c", "y", "x" if r else "y")]]
    >>> rows += [("majority", r, lr, g, "y") for r in (0, 1) for lr, g in
    ...          [("a", "x"), ("b", "y"), ("c", "y")]]
    >>> p = pd.DataFrame(rows, columns=["classifier", "repeat", "learner", "group",
    ...                                 "predicted"]).assign(fraction=1.0)
    >>> p["proba_y"] = (p["predicted"] == "y").astype(float)
    >>> p["proba_x"] = 1 - p["proba_y"]
    >>> t = early_prediction_table(p, ["x", "y"], n_bootstrap=10)
    >>> r = t.iloc[0]
    >>> [round(float(r[c]), 3) for c in ("n_repeats", "accuracy", "accuracy_min",
    ...                                   "accuracy_max")]
    [2.0, 0.833, 0.667, 1.0]
    """
    group_names = list(group_names)
    k = len(group_names)
    pos = {g: i for i, g in enumerate(group_names)}
    if "repeat" not in predictions.columns:
        predictions = predictions.assign(repeat=0)
    preds = predictions.sort_values(["classifier", "fraction", "repeat", "learner"],
                                    kind="mergesort")
    cells = {key: part for key, part in
             preds.groupby(["classifier", "fraction", "repeat"], sort=False)}
    classifiers = list(dict.fromkeys(predictions["classifier"]))
    if "majority" not in classifiers:
        raise ParameterError("predictions need the 'majority' classifier as the baseline.")
    fractions = sorted(set(predictions["fraction"]))
    repeats = {name: sorted({r for (c, _f, r) in cells if c == name}) for name in classifiers}
    missing = sorted(set().union(*repeats.values()) - set(repeats["majority"]))
    if missing:
        raise ParameterError(f"predictions lack the 'majority' baseline in repetition(s) "
                             f"{missing}; the baseline must run in every repetition.")
    first = cells[(classifiers[0], fractions[0], repeats[classifiers[0]][0])]
    learners = first["learner"].to_numpy()
    n = len(learners)
    rng = np.random.default_rng(random_state)
    boot = rng.integers(0, n, size=(n_bootstrap, n))
    weights = _bootstrap_weights(boot, n)
    q = (1 - confidence) / 2
    rows = []
    for frac in fractions:
        base_right = {}
        for r in repeats["majority"]:
            base = cells[("majority", frac, r)]
            y = base["group"].map(pos).to_numpy(dtype=np.int64)
            base_right[r] = base["predicted"].map(pos).to_numpy() == y
        for name in classifiers:
            point, boots, right = [], [], []
            for r in repeats[name]:
                part = cells.get((name, frac, r))
                if part is None or not np.array_equal(part["learner"].to_numpy(), learners):
                    raise ParameterError(
                        f"Classifier {name!r} at fraction {frac} (repetition {r}) covers other "
                        f"learners than {classifiers[0]!r}; every cell must cover the same "
                        f"held-out learners.")
                y = part["group"].map(pos).to_numpy(dtype=np.int64)
                pred = part["predicted"].map(pos).to_numpy(dtype=np.int64)
                proba = part[[f"proba_{g}" for g in group_names]].to_numpy(dtype=float)
                point.append(_metrics(y, pred, proba, np.ones((1, n)), k))
                boots.append(_metrics(y, pred, proba, weights, k))
                right.append(pred == y)
            row = {"classifier": name, "fraction": float(frac), "n_learners": n,
                   "n_repeats": len(repeats[name])}
            for key in point[0]:
                col = _metric_column(key, group_names)
                per_repeat = np.array([p[key][0] for p in point])
                row[col] = float(np.mean(per_repeat))
                vals = np.mean([b[key] for b in boots], axis=0)
                vals = vals[np.isfinite(vals)]
                if len(vals):
                    row[f"{col}_low"] = float(np.quantile(vals, q))
                    row[f"{col}_high"] = float(np.quantile(vals, 1 - q))
                else:
                    row[f"{col}_low"] = row[f"{col}_high"] = float("nan")
                row[f"{col}_min"] = float(np.min(per_repeat))
                row[f"{col}_max"] = float(np.max(per_repeat))
            share = np.mean(right, axis=0)
            share_base = np.mean([base_right[r] for r in repeats[name]], axis=0)
            b = int(np.sum(share > share_base))
            c = int(np.sum(share < share_base))
            p = float(binomtest(b, b + c, 0.5, alternative="greater").pvalue) if b + c else 1.0
            row.update(baseline_accuracy=float(share_base.mean()),
                       n_classifier_better=b, n_baseline_better=c, p_value=p,
                       beats_baseline=bool(p < alpha) and name != "majority")
            rows.append(row)
    table = pd.DataFrame(rows)
    metric_cols = []
    for key in metric_names(group_names):
        metric_cols += [key, f"{key}_low", f"{key}_high", f"{key}_min", f"{key}_max"]
    cols = (["classifier", "fraction", "n_learners", "n_repeats"] + metric_cols
            + ["baseline_accuracy", "n_classifier_better", "n_baseline_better",
               "p_value", "beats_baseline"])
    return table[cols]


def metric_names(group_names):
    """Metric columns of the early-prediction table, in order.

    Examples
    --------
    >>> metric_names(["strong", "weak"])
    ['accuracy', 'balanced_accuracy', 'recall_strong', 'recall_weak', 'roc_auc']
    """
    return ["accuracy", "balanced_accuracy"] + [f"recall_{g}" for g in group_names] + ["roc_auc"]


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
