"""Lag sequential analysis: lag-1 transitions per group, adjusted residuals, Yule's Q."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy import stats

from .._util.checks import check_choice
from ..config import DEFAULT_CONFIG
from ..errors import ParameterError
from .effects import fisher_exact_many
from .multitest import adjust_pvalues

__all__ = [
    "transitions",
    "transition_counts",
    "adjusted_residuals",
    "quasi_independence_expected",
    "yules_q",
    "learner_transition_tests",
    "welch_means_test",
    "TRANSITION_COLUMNS",
    "MAX_TRANSITION_CELLS",
]

#: Largest number of cells (groups x vocabulary x vocabulary) of the dense transition
#: tables; about 2 GB of working memory. Larger vocabularies stop with a message.
MAX_TRANSITION_CELLS = 2**25

#: Columns of the table returned by :func:`transitions` (``transitions.csv``).
TRANSITION_COLUMNS = [
    "group", "from", "to", "count", "from_total", "to_total", "total", "expected",
    "probability", "adjusted_residual", "yules_q", "learners", "learner_probability",
    "p_learners", "q_learners", "p_pooled", "q_pooled",
]


def transitions(db, *, exclude_pauses=DEFAULT_CONFIG["transitions"]["exclude_pauses"],
                structural_zeros="auto", correction="bh"):
    """Lag-1 transition table per group: adjusted residuals (description) and a
    learner-level test of the group difference (inference).

    Parameters
    ----------
    db : SequenceDB
    exclude_pauses : bool
        Drop pause tokens first, so the action before a pause is followed by the
        action after it. Default: count over the full token stream, pauses included.
    structural_zeros : {"auto", "none"} or array_like of bool, shape (n_vocab, n_vocab)
        Cells that cannot occur by construction. ``"auto"``: a pause never follows a
        pause (pauses only sit between events), and when the encoding collapsed
        repeats (``db.encoding["collapse_repeats"]``) an action never follows itself;
        a cell actually observed is never treated as structural. Expected counts then
        come from iterative proportional fitting (quasi-independence) instead of
        ``row * column / total``. ``"none"``: no structural zeros.
    correction : {"bh", "holm"}
        Correction of ``p_learners`` and ``p_pooled`` over all listed transitions.

    Returns
    -------
    pandas.DataFrame
        One row per (group, from, to) for every transition observed in at least one
        group, groups in ``db.group_names`` order (sequences without a group are left
        out; a database without groups gives one group named ``"all"``). Columns
        (:data:`TRANSITION_COLUMNS`):

        ``count`` x, transitions a -> b in the group; ``from_total`` r, transitions
        leaving a; ``to_total`` c, transitions entering b; ``total`` N, all lag-1
        transitions of the group; ``expected`` e = r c / N (or the
        quasi-independence fit); ``probability`` x / r, the transition probability;
        ``adjusted_residual`` z = (x - e) / sqrt(e (1 - r/N) (1 - c/N)) (Allison &
        Liker 1982; Bakeman & Gottman 1997), |z| > 1.96 marks a transition more
        (or less) frequent than chance at about the 5% level, uncorrected;
        ``yules_q`` (AD - BC) / (AD + BC) from the 2x2 collapse A = x, B = r - x,
        C = c - x, D = N - r - c + x; ``learners`` the group's learners with at least
        one transition out of a; ``learner_probability`` the mean over those learners
        of their own share of a's transitions that go to b; ``p_learners`` the
        learner-level test that the groups' mean shares are equal (Welch's t test for
        two groups, pairwise Welch tests with Bonferroni otherwise; see
        :func:`learner_transition_tests`);
        ``q_learners`` its
        adjustment; ``p_pooled`` the token-level test on the groups x (to b, to other)
        table of pooled counts (Fisher exact for two groups, Pearson chi-square
        otherwise), which treats every transition as independent and so overstates
        the evidence (description only); ``q_pooled`` its adjustment. Test columns are
        NaN with one group and repeated on each group's row of the transition.

    Notes
    -----
    Adjusted residuals, Yule's Q and the pooled test count transitions as if each
    were an independent observation; a few very active learners then dominate, and
    with many transitions tiny p-values follow from small differences. They
    *describe* where the groups' transition tables differ; the learner-level test
    (each learner counted once, whatever their activity) is the inference.

    With structural zeros the adjusted-residual formula above is kept with the
    fitted expected counts; it is then an approximation (common practice).
    Transitions are within sequences only; the last token of a sequence starts none.
    Sessions of one learner are merged for the learner-level test.

    References
    ----------
    Allison, P. D. & Liker, J. K. (1982). Analyzing sequential categorical data on
    dyadic interaction. Psychological Bulletin 91(2), 393-403. Bakeman, R. &
    Gottman, J. M. (1997). Observing Interaction, 2nd ed. Haberman, S. J. (1973),
    The analysis of residuals in cross-classified tables. Biometrics 29, 205-220.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a", "b", "a", "b"], ["b", "a", "a"]] * 3,
    ...                            groups=["strong", "weak"] * 3)
    >>> t = transitions(db)
    >>> t[["group", "from", "to", "count", "probability"]].head(3)
        group from to  count  probability
    0  strong    a  a      0          0.0
    1  strong    a  b      6          1.0
    2  strong    b  a      3          1.0
    """
    _check_size(db)
    structural = _structural_mask(db, structural_zeros)
    correction = check_choice(correction, "correction", ("bh", "holm"), "transitions")
    counts, names = transition_counts(db, exclude_pauses=exclude_pauses)
    n_groups, v, _ = counts.shape
    observed = counts.sum(axis=0) > 0
    allowed = ~structural | observed
    pairs = np.argwhere(observed)
    # rows: by vocabulary id of 'from', then of 'to'
    frames = []
    x_all = counts[:, pairs[:, 0], pairs[:, 1]] if len(pairs) else np.zeros((n_groups, 0))
    r_all = counts.sum(axis=2)
    p_diff = _group_difference(x_all, r_all[:, pairs[:, 0]] if len(pairs) else x_all)
    q_diff = adjust_pvalues(p_diff, correction)
    lt = learner_transition_tests(db, pairs, exclude_pauses=exclude_pauses)
    q_learn = adjust_pvalues(lt["p_learners"], correction)
    vocab = np.array(db.vocab, dtype=object)
    for g in range(n_groups):
        table = counts[g].astype(np.float64)
        r = table.sum(axis=1)
        c = table.sum(axis=0)
        n = table.sum()
        if np.all(allowed):
            expected = np.outer(r, c) / n if n > 0 else np.zeros_like(table)
        else:
            expected = quasi_independence_expected(table, allowed)
        z = adjusted_residuals(table, expected)
        a_, b_ = pairs[:, 0], pairs[:, 1]
        x = table[a_, b_]
        with np.errstate(divide="ignore", invalid="ignore"):
            prob = np.where(r[a_] > 0, x / r[a_], np.nan)
        frames.append(pd.DataFrame({
            "group": names[g], "from": vocab[a_], "to": vocab[b_],
            "count": x.astype(np.int64), "from_total": r[a_].astype(np.int64),
            "to_total": c[b_].astype(np.int64), "total": np.full(len(a_), int(n)),
            "expected": expected[a_, b_], "probability": prob,
            "adjusted_residual": z[a_, b_],
            "yules_q": yules_q(x, r[a_] - x, c[b_] - x, n - r[a_] - c[b_] + x),
            "learners": lt["learners"][g], "learner_probability": lt["mean_share"][g],
            "p_learners": lt["p_learners"], "q_learners": q_learn,
            "p_pooled": p_diff, "q_pooled": q_diff,
        }))
    if not frames:
        return pd.DataFrame({c: [] for c in TRANSITION_COLUMNS})
    return pd.concat(frames, ignore_index=True)[TRANSITION_COLUMNS]


def transition_counts(db, *, exclude_pauses=DEFAULT_CONFIG["transitions"]["exclude_pauses"]):
    """Lag-1 transition counts per group.

    Parameters
    ----------
    db : SequenceDB
    exclude_pauses : bool
        Remove pause tokens before counting.

    Returns
    -------
    counts : ndarray of int64, shape (n_groups, n_vocab, n_vocab)
        ``counts[g, a, b]`` = number of times token ``b`` directly follows token
        ``a`` within a sequence of group ``g``.
    names : list of str
        Group names (``["all"]`` when the database has no groups).

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> db = SequenceDB.from_lists([["a", "b", "a"], ["b", "b"]])
    >>> counts, names = transition_counts(db)
    >>> names, counts[0].tolist()
    (['all'], [[0, 1], [1, 1]])
    """
    _check_size(db)
    tokens = np.asarray(db.tokens, dtype=np.int64)
    seq = db.seq_index
    if exclude_pauses:
        keep = ~db.is_pause[tokens]
        tokens, seq = tokens[keep], seq[keep]
    v = len(db.vocab)
    if db.n_groups == 0 or np.all(db.groups < 0):
        seq_group = np.zeros(db.n_sequences, dtype=np.int64)
        names = ["all"]
    else:
        seq_group = db.groups
        names = list(db.group_names)
    same = seq[1:] == seq[:-1]
    frm, to = tokens[:-1][same], tokens[1:][same]
    grp = seq_group[seq[:-1][same]] if len(seq) else np.zeros(0, dtype=np.int64)
    ok = grp >= 0
    flat = (grp[ok] * v + frm[ok]) * v + to[ok]
    counts = np.bincount(flat, minlength=len(names) * v * v).reshape(len(names), v, v)
    return counts.astype(np.int64), names


def learner_transition_tests(db, pairs, *, exclude_pauses=False):
    """Learner-level test of each transition a -> b between groups.

    Each learner's transitions (over all their sequences) give their own share of a's
    transitions that go to b, ``x_i / r_i``, defined for learners with ``r_i > 0``.
    The groups' mean shares are compared with Welch's t test (two groups; pairwise with
    Bonferroni for more), see :func:`welch_means_test`. Every learner counts once,
    however active. Given ``r_i``, the share has mean p whatever ``r_i`` is, but its
    spread shrinks as ``r_i`` grows, so groups that differ in activity differ in
    spread: a test of means that allows unequal variances stays valid there, while a
    rank test (which compares whole distributions) would not.

    Parameters
    ----------
    db : SequenceDB
    pairs : ndarray of int, shape (k, 2)
        (from, to) vocabulary ids of the transitions to test.
    exclude_pauses : bool
        Drop pause tokens first (as in :func:`transitions`).

    Returns
    -------
    dict
        ``learners`` (n_groups, k): learners of each group with ``r_i > 0``;
        ``mean_share`` (n_groups, k): their mean share (NaN without learners);
        ``p_learners`` (k,): p-values (NaN when fewer than two groups have such
        learners, or the database has one group).

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> seqs = [["a", "b", "a", "b"], ["a", "a", "b"], ["a", "b", "b"], ["a", "a", "a", "b"],
    ...         ["a", "b", "a", "b", "a", "b"], ["a", "a", "b", "a"], ["a", "b", "a", "a"],
    ...         ["b", "a", "a"]]
    >>> db = SequenceDB.from_lists(seqs, groups=["strong", "weak"] * 4)
    >>> out = learner_transition_tests(db, np.array([[0, 1]]))
    >>> out["mean_share"][:, 0].round(4).tolist(), round(float(out["p_learners"][0]), 4)
    ([0.875, 0.3333], 0.0198)

    (shares 1, 1, 1, 1/2 against 1/2, 1/3, 1/2, 0; ``scipy.stats.ttest_ind(...,
    equal_var=False)`` gives the same p.)
    """
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    k = len(pairs)
    n_groups = db.n_groups
    out = {"learners": np.zeros((max(n_groups, 1), k), dtype=np.int64),
           "mean_share": np.full((max(n_groups, 1), k), np.nan), "p_learners": np.full(k, np.nan)}
    if n_groups < 2 or k == 0 or np.all(db.groups < 0):
        return out
    tokens = np.asarray(db.tokens, dtype=np.int64)
    seq = db.seq_index
    if exclude_pauses:
        keep = ~db.is_pause[tokens]
        tokens, seq = tokens[keep], seq[keep]
    names, inverse = np.unique(db.learners, return_inverse=True)
    learner_of_seq = inverse.ravel()
    n_l = len(names)
    group_l = np.full(n_l, -1, dtype=np.int64)
    group_l[learner_of_seq] = db.groups      # a learner's group (one per learner)
    v = len(db.vocab)
    same = seq[1:] == seq[:-1]
    frm, to = tokens[:-1][same], tokens[1:][same]
    lid = learner_of_seq[seq[:-1][same]]
    keys = pairs[:, 0] * v + pairs[:, 1]
    order = np.argsort(keys, kind="stable")
    flat = frm * v + to
    pos = np.minimum(np.searchsorted(keys[order], flat), k - 1)
    sel = keys[order][pos] == flat
    pair_idx = order[pos[sel]]
    x = sp.csc_matrix((np.ones(int(sel.sum())), (lid[sel], pair_idx)), shape=(n_l, k))
    r = sp.csc_matrix((np.ones(len(frm)), (lid, frm)), shape=(n_l, v))
    for a in np.unique(pairs[:, 0]):
        cols = np.flatnonzero(pairs[:, 0] == a)
        ra = r[:, int(a)].toarray().ravel()
        rows = np.flatnonzero((ra > 0) & (group_l >= 0))
        if len(rows) == 0:
            continue
        share = sp.csc_matrix(sp.diags(1.0 / ra[rows]) @ x[rows][:, cols])
        lab = group_l[rows]
        sizes = np.bincount(lab, minlength=n_groups).astype(np.float64)
        out["learners"][:, cols] = sizes[:, None]
        ind = sp.csr_matrix((np.ones(len(rows)), (lab, np.arange(len(rows)))),
                            shape=(n_groups, len(rows)))
        sums = np.asarray((ind @ share).todense())
        sumsq = np.asarray((ind @ share.multiply(share)).todense())
        with np.errstate(divide="ignore", invalid="ignore"):
            out["mean_share"][:, cols] = np.where(sizes[:, None] > 0,
                                                  sums / sizes[:, None], np.nan)
        out["p_learners"][cols] = welch_means_test(sums, sumsq, sizes)
    return out


def welch_means_test(sums, sumsq, sizes):
    """Heteroscedastic test that group means are equal, per column.

    Parameters
    ----------
    sums, sumsq : ndarray, shape (n_groups, k)
        Per group, the sum and the sum of squares of each column's values.
    sizes : ndarray, shape (n_groups,)
        Values per group.

    Returns
    -------
    ndarray, shape (k,)
        Two groups: Welch's t test, two-sided (``scipy.stats.ttest_ind(equal_var=False)``).
        More groups: Welch's t test for every pair, combined by Bonferroni (the smallest
        pair p-value times the number of pairs, at most 1). Only groups with at least two
        values take part; NaN when fewer than two do. A pair without any spread gives 1.0
        for equal means (scipy gives NaN) and 0.0 for different means (as scipy).

    Notes
    -----
    Welch's one-way ANOVA (Welch 1951) would be the classical omnibus test, but on
    generated null data with three groups of 40 learners and skewed shares it rejected
    too often (family-wise error 0.06 to 0.09 at a nominal 0.05 over about 150
    transitions); the Bonferroni combination of pairwise Welch tests held its level
    (0.02) and stays valid whatever the groups' spreads.

    Examples
    --------
    >>> x, y = np.array([1.0, 0.5, 0.75]), np.array([0.0, 0.25, 0.5, 0.25])
    >>> p = welch_means_test(np.array([[x.sum()], [y.sum()]]),
    ...                      np.array([[x @ x], [y @ y]]), np.array([3, 4]))
    >>> from scipy import stats
    >>> bool(np.isclose(p[0], stats.ttest_ind(x, y, equal_var=False).pvalue))
    True
    """
    sums = np.asarray(sums, dtype=np.float64)
    sumsq = np.asarray(sumsq, dtype=np.float64)
    sizes = np.asarray(sizes, dtype=np.float64)
    use = np.flatnonzero(sizes >= 2)
    if len(use) < 2:
        return np.full(sums.shape[1], np.nan)
    n = sizes[use][:, None]
    mean = sums[use] / n
    var = np.maximum(sumsq[use] - n * mean ** 2, 0.0) / (n - 1)
    var = np.where(var < 1e-12 * np.maximum(mean ** 2, 1.0), 0.0, var)
    se2 = var / n
    pairs = [(a, b) for a in range(len(use)) for b in range(a + 1, len(use))]
    best = np.ones(sums.shape[1])
    for a, b in pairs:
        s2 = se2[a] + se2[b]
        with np.errstate(divide="ignore", invalid="ignore"):
            t = (mean[a] - mean[b]) / np.sqrt(s2)
            df = s2 ** 2 / (se2[a] ** 2 / (n[a] - 1) + se2[b] ** 2 / (n[b] - 1))
            p = 2.0 * stats.t.sf(np.abs(t), df)
        # no spread in either group: equal means give 1, different means 0 (as scipy)
        flat = np.abs(mean[a] - mean[b]) <= 1e-12
        best = np.minimum(best, np.where(s2 > 0, p, np.where(flat, 1.0, 0.0)))
    return np.minimum(best * len(pairs), 1.0)


def adjusted_residuals(table, expected=None):
    """Adjusted (standardised) residuals of a two-way table.

    ``z = (x - e) / sqrt(e (1 - r/N) (1 - c/N))`` with ``e = r c / N`` unless
    ``expected`` is given; NaN where ``e`` is 0.

    Examples
    --------
    Agresti (2007), party identification by gender (residuals equal statsmodels):

    >>> adjusted_residuals([[279, 73, 225], [165, 47, 191]])[0].round(4).tolist()
    [2.2932, 0.4648, -2.6178]
    """
    x = np.asarray(table, dtype=np.float64)
    r = x.sum(axis=1, keepdims=True)
    c = x.sum(axis=0, keepdims=True)
    n = x.sum()
    if expected is None:
        expected = r * c / n if n > 0 else np.zeros_like(x)
    expected = np.asarray(expected, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        var = expected * (1 - r / n) * (1 - c / n)
        z = np.where(var > 0, (x - expected) / np.sqrt(np.where(var > 0, var, 1.0)), np.nan)
    return z


def quasi_independence_expected(table, allowed, *, tol=1e-10, max_iter=10_000):
    """Expected counts under quasi-independence by iterative proportional fitting.

    Fits ``e[i, j] = alpha[i] * beta[j]`` on the allowed cells (0 on structural
    zeros) so that row and column sums equal those of ``table`` (Deming & Stephan
    1940; Bishop, Fienberg & Holland 1975, ch. 5).

    Parameters
    ----------
    table : array_like, shape (n_rows, n_cols)
    allowed : array_like of bool, same shape
        False on structural zeros.

    Returns
    -------
    ndarray of float

    Examples
    --------
    >>> e = quasi_independence_expected([[0, 4, 2], [3, 0, 5], [1, 6, 0]],
    ...                                 ~np.eye(3, dtype=bool))
    >>> e.sum(axis=1).round(6).tolist(), e.diagonal().tolist()
    ([6.0, 8.0, 7.0], [0.0, 0.0, 0.0])
    """
    x = np.asarray(table, dtype=np.float64)
    allowed = np.asarray(allowed, dtype=bool)
    if allowed.shape != x.shape:
        raise ParameterError(
            f"The structural-zero mask has shape {allowed.shape}; the table has {x.shape}.")
    r = x.sum(axis=1)
    c = x.sum(axis=0)
    e = allowed.astype(np.float64)
    e[r == 0, :] = 0.0
    e[:, c == 0] = 0.0
    for _ in range(max_iter):
        rs = e.sum(axis=1)
        e *= np.where(rs > 0, r / np.where(rs > 0, rs, 1.0), 0.0)[:, None]
        cs = e.sum(axis=0)
        e *= np.where(cs > 0, c / np.where(cs > 0, cs, 1.0), 0.0)[None, :]
        if np.max(np.abs(e.sum(axis=1) - r), initial=0.0) < tol:
            break
    return e


def yules_q(a, b, c, d):
    """Yule's Q of 2x2 tables ``[[a, b], [c, d]]``: ``(ad - bc) / (ad + bc)``.

    Equal to ``(OR - 1) / (OR + 1)``; NaN when ``ad + bc`` is 0.

    Examples
    --------
    >>> float(yules_q(3, 1, 1, 3))
    0.8
    """
    a, b, c, d = (np.asarray(v, dtype=np.float64) for v in (a, b, c, d))
    num = a * d - b * c
    den = a * d + b * c
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


# --------------------------------------------------------------------- helpers
def _check_size(db):
    v, g = len(db.vocab), max(db.n_groups, 1)
    if g * v * v > MAX_TRANSITION_CELLS:
        raise ParameterError(
            f"The vocabulary has {v} distinct tokens; the transition tables would need "
            f"{g} x {v} x {v} cells (limit {MAX_TRANSITION_CELLS}). Merge rare actions with "
            f"--mapping or use a coarser --template.")


def _structural_mask(db, structural_zeros):
    v = len(db.vocab)
    if isinstance(structural_zeros, str):
        check_choice(structural_zeros, "structural_zeros", ("auto", "none"), "transitions")
        mask = np.zeros((v, v), dtype=bool)
        if structural_zeros == "auto":
            pause = np.asarray(db.is_pause, dtype=bool)
            mask |= pause[:, None] & pause[None, :]
            if (db.encoding or {}).get("collapse_repeats"):
                mask |= np.diag(~pause)
        return mask
    mask = np.asarray(structural_zeros, dtype=bool)
    if mask.shape != (v, v):
        raise ParameterError(
            f"The 'structural_zeros' mask of transitions must have shape ({v}, {v}) (one row and "
            f"column per vocabulary token); got {mask.shape}.")
    return mask


def _group_difference(x, r):
    """p-value per transition that x_g / r_g is equal across groups (columns)."""
    n_groups, m = x.shape
    if n_groups < 2 or m == 0:
        return np.full(m, np.nan)
    if n_groups == 2:
        return fisher_exact_many(x[0], r[0] - x[0], x[1], r[1] - x[1])
    x = x.astype(np.float64)
    r = r.astype(np.float64)
    k = x.sum(axis=0)
    n = r.sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        e1 = r * k / n
        e0 = r * (n - k) / n
        t1 = np.where(e1 > 0, (x - e1) ** 2 / np.where(e1 > 0, e1, 1.0), 0.0)
        t0 = np.where(e0 > 0, ((r - x) - e0) ** 2 / np.where(e0 > 0, e0, 1.0), 0.0)
    chi = (t1 + t0).sum(axis=0)
    df = (r > 0).sum(axis=0) - 1
    degenerate = (k == 0) | (k == n) | (df < 1)
    return np.where(degenerate, 1.0, stats.chi2.sf(chi, np.maximum(df, 1)))
