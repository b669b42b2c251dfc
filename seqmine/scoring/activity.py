"""How much the groups differ in activity: events and sequence length per learner."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .effects import kruskal_sparse, mannwhitney_sparse

__all__ = ["activity_comparison", "describe"]


def activity_comparison(db):
    """Events, tokens and sequences per learner in each group, with a test.

    Parameters
    ----------
    db : SequenceDB
        Sequences with groups; a learner's sequences (sessions) are added up.

    Returns
    -------
    dict
        ``events_per_learner``, ``tokens_per_learner``, ``sequences_per_learner``:
        ``{group: describe(...)}`` (see :func:`describe`); ``test``: the test used;
        ``p_value``: two-sided Mann-Whitney U on events per learner (two groups) or
        Kruskal-Wallis (more), as scipy computes them; for two groups also
        ``cliffs_delta`` (P(first group more active) - P(second more active)) and
        ``ratio_of_means`` (mean events, first group over second). Learners without a
        group are left out.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a"] * 9, ["a"] * 3, ["a"] * 8, ["a"] * 4],
    ...                            groups=["strong", "weak", "strong", "weak"])
    >>> out = activity_comparison(db)
    >>> out["events_per_learner"]["strong"]["mean"], out["ratio_of_means"]
    (8.5, 2.4286)
    """
    names, inverse = np.unique(db.learners, return_inverse=True)
    lid = inverse.ravel()
    n_l = len(names)
    seq = db.seq_index
    events = np.bincount(lid[seq[db.action_mask]], minlength=n_l).astype(np.float64)
    tokens = np.bincount(lid, weights=db.lengths, minlength=n_l)
    sequences = np.bincount(lid, minlength=n_l).astype(np.float64)
    group = np.full(n_l, -1, dtype=np.int64)
    group[lid] = db.groups
    out = {key: {g: describe(vals[group == k]) for k, g in enumerate(db.group_names)}
           for key, vals in (("events_per_learner", events), ("tokens_per_learner", tokens),
                             ("sequences_per_learner", sequences))}
    present = [k for k in range(db.n_groups) if np.any(group == k)]
    out["test"] = ""
    out["p_value"] = None
    if len(present) == 2:
        a, b = (events[group == k] for k in present)
        col = sp.csc_matrix(np.r_[a, b][:, None])
        u, p = mannwhitney_sparse(col, np.r_[np.ones(len(a), bool), np.zeros(len(b), bool)])
        out["test"] = "Mann-Whitney U (two-sided) on events per learner"
        out["p_value"] = float(p[0])
        out["cliffs_delta"] = round(float(2.0 * u[0] / (len(a) * len(b)) - 1.0), 6)
        out["ratio_of_means"] = round(float(a.mean() / b.mean()), 4) if b.mean() > 0 else None
    elif len(present) > 2:
        sel = np.isin(group, present)
        remap = {k: i for i, k in enumerate(present)}
        h, p = kruskal_sparse(sp.csc_matrix(events[sel][:, None]),
                              np.array([remap[g] for g in group[sel]]), len(present))
        out["test"] = "Kruskal-Wallis on events per learner"
        out["p_value"] = float(p[0])
    return out


def describe(values):
    """Count, mean and five-number summary of finite values (rounded to 6 digits).

    Examples
    --------
    >>> describe(np.array([1.0, 2.0, 3.0, np.nan]))
    {'n': 3, 'mean': 2.0, 'min': 1.0, 'q1': 1.5, 'median': 2.0, 'q3': 2.5, 'max': 3.0}
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if len(v) == 0:
        return {"n": 0}
    q = np.quantile(v, [0, 0.25, 0.5, 0.75, 1])
    return {"n": int(len(v)), "mean": round(float(v.mean()), 6),
            "min": round(float(q[0]), 6), "q1": round(float(q[1]), 6),
            "median": round(float(q[2]), 6), "q3": round(float(q[3]), 6),
            "max": round(float(q[4]), 6)}
