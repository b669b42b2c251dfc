"""Differential scoring: which mined patterns separate outcome groups, with honest statistics."""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd
import scipy.sparse as sp

from .._util.checks import check_choice, check_fraction, check_int
from ..config import CONTRAST_CORRECTIONS, DEFAULT_CONFIG
from ..errors import ParameterError, SeqmineWarning
from ..mining.patterns import PatternSet, pattern_id, tokens_text
from .effects import (
    chi2_presence,
    cohens_h,
    fisher_exact_many,
    growth_rate,
    kruskal_sparse,
    mannwhitney_sparse,
    odds_ratio_haldane,
)
from .evidence import classify_evidence, evidence_tests
from .multitest import adjust_pvalues
from .permutation import (
    bootstrap_significance,
    westfall_young_minp,
    westfall_young_rates,
)
from .redundancy import prune_redundant
from .replication import split_half_replication

__all__ = [
    "contrast",
    "pairwise_contrast",
    "sequence_rates",
    "MIN_GROUP_SIZE",
    "SMALL_GROUP_SIZE",
    "CONTRAST_CORRECTIONS",
]

#: A compared group needs at least this many sequences (else ParameterError).
MIN_GROUP_SIZE = 2
#: Below this many sequences in a compared group a SeqmineWarning says the tests
#: have little power (common practice, not a published threshold).
SMALL_GROUP_SIZE = 5
#: Values of the ``correction`` parameter.

_RATE_UNITS = ("tokens", "actions", "count")
_DEFAULTS = DEFAULT_CONFIG["contrast"]
_ORDERS = ("significance", "length")


def contrast(patterns, db=None, *, lengths=None, groups=None,
             correction=_DEFAULTS["correction"], alpha=_DEFAULTS["alpha"],
             n_permutations=_DEFAULTS["n_permutations"], random_state=DEFAULT_CONFIG["seed"],
             n_bootstrap=_DEFAULTS["n_bootstrap"],
             n_replication_splits=_DEFAULTS["n_replication_splits"],
             n_volume_strata=_DEFAULTS["n_volume_strata"], redundancy=_DEFAULTS["redundancy"],
             redundancy_order="significance", drop_redundant=False, rate_unit=None,
             unit=_DEFAULTS["unit"], batch_size=None, n_jobs=DEFAULT_CONFIG["n_jobs"],
             scheduler=None):
    """Score every pattern for how it separates outcome groups.

    Parameters
    ----------
    patterns : PatternSet
        Mined or matched patterns with their sparse instance-count matrix.
    db : SequenceDB, optional
        The database the patterns were counted on; gives sequence lengths for rates
        (and action counts for ``rate_unit="actions"``), each unit's activity volume
        (events) for the volume adjustment, its token counts for the order test, and
        which sequences belong to which learner.
    lengths : array_like of int, optional
        Length of each sequence in tokens, instead of ``db`` (then also the activity
        volume; no order test).
    groups : sequence of str, optional
        Names of the groups to compare. Two names give a two-group contrast (the
        first is "group A" for signed effect sizes); more give an omnibus test.
        Default: every group with sequences, in ``patterns.group_names`` order.
    correction : {"bh", "holm", "westfall-young"}
        Multiple-comparison control of ``q_value``: Benjamini-Hochberg FDR, Holm
        FWER, or the Westfall-Young step-down min-P permutation FWER (labels permuted
        across sequences; see :func:`seqmine.scoring.multitest.westfall_young_minp`).
    alpha : float
        Level: ``favours`` is filled when ``q_value <= alpha``; also the nominal
        level of the stability resamples.
    n_permutations : int
        Permutations for ``"westfall-young"``.
    random_state : int
        Seed of the permutations and bootstrap resamples (same seed, same table).
    n_bootstrap : int
        Stratified bootstrap resamples for ``stability`` (0 = skip, column NaN).
    n_replication_splits : int
        Random half splits for ``replication`` (0 = skip, column NaN).
    n_volume_strata : int, optional
        Activity strata of the volume adjustment; default about one per ten units
        (at least 2, at most 50; see :func:`seqmine.scoring.adjusted.activity_strata`).
    redundancy : float or None
        Jaccard threshold on supporting-sequence sets for ``redundant_of``
        (None = no pruning).
    redundancy_order : {"significance", "length"}
        Which pattern of a near-duplicate pair is kept: ``"significance"`` keeps the
        smaller p-value (then the shorter); ``"length"`` the shorter (then the
        smaller p-value).
    drop_redundant : bool
        Drop rows with a non-empty ``redundant_of`` instead of marking them.
    rate_unit : {"tokens", "actions", "count"}, optional
        Rates are instance counts per 100 tokens of the sequence (pauses included),
        per 100 action tokens (needs ``db``), or raw instance counts per sequence.
        Default: ``"tokens"`` when lengths are known, else ``"count"``.
    unit : {"learner", "sequence", "auto"}
        Unit of analysis. ``"learner"`` first merges each learner's sequences
        (sessions, known from ``db``): instance counts, lengths and token counts are
        summed, a pattern is present when it occurs in any of them; supports are then
        shares of learners and permutations, resamples and splits move whole learners
        (without ``db`` each sequence counts as one learner). ``"sequence"`` treats
        every sequence (session) as an independent unit and warns
        (``sessions_not_independent``) when a learner has several. ``"auto"`` is the
        same as ``"learner"`` (kept for configurations that spell it so).
    batch_size : int, optional
        Permutations/resamples per sparse product (memory bound).
    n_jobs, scheduler
        Westfall-Young permutations in ``n_jobs`` local processes or on a Dask cluster
        (``"local"`` or an address); the table is identical to the serial run.

    Returns
    -------
    pandas.DataFrame
        One row per pattern, sorted by ``p_value`` (ties keep the pattern order).
        Columns for two groups A, B:

        ``pattern_id`` stable identifier (:func:`~seqmine.mining.patterns.pattern_id`);
        ``pattern`` tokens joined by ``" > "``; ``tokens`` the tokens as a JSON list
        (exact even when a token contains ``" > "``); ``length``; ``support_<g>`` share of
        group g's sequences containing the pattern (every group of the PatternSet);
        ``rate_<g>`` mean rate (see ``rate_unit``); ``p_value`` two-sided Fisher
        exact test on presence (A vs B); ``q_value`` adjusted by ``correction``;
        ``p_volume`` Cochran-Mantel-Haenszel test of presence across activity strata
        (the difference at equal activity volume); ``q_volume`` its adjustment (same
        correction; Holm, also a family-wise control, for "westfall-young");
        ``p_order`` (patterns of two or more tokens) the same stratified test among the
        units that hold every item of the pattern: does the group difference concern
        the order, beyond the items occurring at all; ``q_order`` its adjustment over
        those patterns (Holm when ``correction`` is "westfall-young"); ``evidence``
        ``"order"`` (``q_order <= alpha``), else ``"presence"`` (``q_volume <= alpha``),
        else ``"volume"`` (only ``q_value <= alpha``: a difference that the activity
        volume explains), else ``""``; ``favours`` the group the evidence test
        favours (``""`` without evidence); ``risk_difference`` support A - support B; ``odds_ratio``
        presence odds A / B, with 0.5 added to every cell of a table with a zero
        cell (Haldane-Anscombe); ``log_odds_ratio``; ``growth_rate`` support A /
        support B (inf when B is 0); ``cohens_h``; ``cliffs_delta`` on rates,
        P(rate A > rate B) - P(rate A < rate B); ``p_rate`` two-sided Mann-Whitney
        U on rates; ``q_rate`` ``p_rate`` adjusted by ``correction`` (for
        "westfall-young" the same permutations applied to the rank test, with the
        normal-approximation p-value as statistic); ``stability``; ``replication``;
        ``redundant_of`` the ``pattern_id`` of the kept pattern whose supporting
        sequences nearly coincide (``""`` if none).

        Without activity volumes (no ``db`` and no ``lengths``) the volume and order
        columns are NaN, ``evidence`` is empty and ``favours`` names the group with
        the higher support when ``q_value <= alpha``.

        For more than two groups the effect-size columns are replaced by ``chi2``
        and ``cramers_v`` (Pearson chi-square on the groups x present/absent table,
        whose p-value is ``p_value``) and ``kruskal_h`` (Kruskal-Wallis on rates,
        ``p_rate``); ``favours`` names the group with the highest support. Use
        :func:`pairwise_contrast` for the pairwise table.

    Notes
    -----
    *Testing family.* Corrections run over all patterns, before redundancy pruning;
    pruning only shapes the reading list and never changes a p- or q-value.

    *Stability.* Each resample draws every compared group's sequences with
    replacement (same sizes); ``stability`` is the fraction of resamples in which
    the raw presence test has p <= ``alpha`` (nominal, uncorrected) with the same
    direction as on the full data (the same sign of the risk difference; with more
    groups the same most-supported group). Resamples reuse the same learners, so
    stability says whether a finding rests on a few of them, not whether it would
    come out again in new learners.

    *Replication.* Each of ``n_replication_splits`` random splits halves every group's
    units; for each finding, ``replication`` is the fraction of splits in which the
    test named by ``evidence`` (the volume-adjusted test for ``"presence"``, the raw
    test for ``"volume"``) has p <= ``alpha`` in both halves, favouring the full-data
    group (:func:`seqmine.scoring.replication.split_half_replication`); NaN for
    patterns without evidence (nothing was found to replicate).

    *Redundancy.* Patterns are visited by priority (``redundancy_order``); a pattern
    is redundant when the Jaccard index of its set of supporting sequences with
    that of an earlier, kept pattern is at least ``redundancy``; it points to the
    highest-priority such pattern. Chains do not propagate: a pattern close only to
    a redundant pattern stays kept.

    *Units.* Learners are the units when ``db`` is given; permutations, resamples and
    splits move whole learners. With ``unit="sequence"`` and several sequences per
    learner, a SeqmineWarning (code ``sessions_not_independent``) says that they are
    treated as independent. Findings are correlational.

    References
    ----------
    Fisher (1935); Mann & Whitney (1947); Mantel & Haenszel (1959); Benjamini &
    Hochberg (1995); Holm (1979); Westfall & Young (1993); Cohen (1988) for h; Cliff
    (1993) for delta; Dong & Li (1999) for growth rate.

    Examples
    --------
    >>> from seqmine.encoding.sequences import SequenceDB
    >>> from seqmine.mining.patterns import PatternSet
    >>> import scipy.sparse as sp
    >>> db = SequenceDB.from_lists([["a", "b"]] * 6 + [["b", "a"]] * 6,
    ...                            groups=["strong"] * 6 + ["weak"] * 6)
    >>> counts = sp.csr_matrix(np.array([[1, 0]] * 6 + [[0, 1]] * 6))
    >>> ps = PatternSet(patterns=[(0, 1), (1, 0)], vocab=db.vocab, is_pause=db.is_pause,
    ...                 group_names=db.group_names, group_sizes=db.group_sizes(),
    ...                 support_counts=[[6, 0], [0, 6]], counts=counts, seq_groups=db.groups)
    >>> table = contrast(ps, db, n_bootstrap=20)
    >>> table[["pattern", "support_strong", "support_weak", "evidence", "favours"]]
      pattern  support_strong  support_weak evidence favours
    0   a > b             1.0           0.0    order  strong
    1   b > a             0.0           1.0    order    weak
    >>> float(table["p_value"].iloc[0].round(6))  # Fisher [[6, 0], [0, 6]]
    0.002165
    """
    prep = _prepare_unit(patterns, db, lengths, groups, rate_unit, unit, "contrast")
    patterns = prep["patterns"]
    correction = check_choice(correction, "correction", CONTRAST_CORRECTIONS, "contrast")
    alpha = check_fraction(alpha, "alpha", "contrast")
    n_permutations = check_int(n_permutations, "n_permutations", "contrast", minimum=1)
    random_state = check_int(random_state, "random_state", "contrast", minimum=0)
    n_bootstrap = check_int(n_bootstrap, "n_bootstrap", "contrast", minimum=0)
    n_replication_splits = check_int(n_replication_splits, "n_replication_splits", "contrast",
                                     minimum=0)
    n_volume_strata = check_int(n_volume_strata, "n_volume_strata", "contrast", minimum=1,
                                allow_none=True)
    if redundancy is not None:
        redundancy = check_fraction(redundancy, "redundancy", "contrast")
    redundancy_order = check_choice(redundancy_order, "redundancy_order", _ORDERS, "contrast")

    names = prep["names"]
    labels = prep["labels"]
    pres = prep["presence"]
    rates = prep["rates"]
    m = patterns.n_patterns
    table = _base_columns(patterns, rates, prep)
    if m == 0:
        return _empty_frame(table, names, correction)

    if len(names) == 2:
        stats = _two_group_stats(pres, rates, labels == 0, labels == 1)
        p = stats["p_value"]
        direction = np.sign(stats["risk_difference"]).astype(np.int64)
        dir_raw = np.where(direction > 0, 0, np.where(direction < 0, 1, -1))
    else:
        counts = np.rint(_group_sums(pres, labels, len(names)))
        sizes = np.bincount(labels, minlength=len(names))
        chi, p = chi2_presence(counts, sizes)
        h, p_rate = kruskal_sparse(rates, labels, len(names))
        frac = counts / sizes[:, None]
        direction = np.argmax(frac, axis=0)
        dir_raw = direction
        stats = {"p_value": p, "chi2": chi,
                 "cramers_v": np.sqrt(chi / sizes.sum()), "kruskal_h": h, "p_rate": p_rate}
    ev = evidence_tests(pres, labels, len(names), patterns.patterns, volume=prep["volume"],
                        token_counts=prep["token_counts"], n_strata=n_volume_strata)

    if correction == "westfall-young":
        _, q = westfall_young_minp(pres, labels, n_permutations=n_permutations,
                                   random_state=random_state, batch_size=batch_size,
                                   n_jobs=n_jobs, scheduler=scheduler)
    else:
        q = adjust_pvalues(p, correction)
    if correction == "westfall-young":
        _, q_rate = westfall_young_rates(rates, labels, n_permutations=n_permutations,
                                         random_state=random_state, batch_size=batch_size,
                                         n_jobs=n_jobs,
                                         scheduler=scheduler)
    else:
        q_rate = adjust_pvalues(stats["p_rate"], correction)

    # the same error rate as q_value; Westfall-Young permutations would have to move
    # learners only within activity strata, and residual activity differences inside a
    # stratum break that exchangeability (family-wise error 0.07 at a nominal 0.05 on
    # generated data), so family-wise control there is Holm's, valid under any dependence
    family = "holm" if correction == "westfall-young" else correction
    q_volume = adjust_pvalues(ev["p_volume"], family)
    q_order = adjust_pvalues(ev["p_order"], family)
    if ev["strata"] is not None:
        evidence, favours = classify_evidence(q, q_volume, q_order, dir_raw, ev["dir_volume"],
                                              ev["dir_order"], names, alpha)
    else:  # no activity volumes: no adjustment, favours follows q_value
        evidence = np.full(m, "", dtype=object)
        _, favours = classify_evidence(q, np.full(m, np.nan), np.full(m, np.nan), dir_raw,
                                       dir_raw, dir_raw, names, alpha)

    if n_bootstrap > 0:
        stability = bootstrap_significance(pres, labels, direction,
                                           n_bootstrap=n_bootstrap, alpha=alpha,
                                           random_state=random_state, batch_size=batch_size)
    else:
        stability = np.full(m, np.nan)

    # replication is of findings: the test named by the evidence (without activity
    # volumes, the raw test of rows that favour a group); NaN for the rest
    if ev["strata"] is None:
        tests = np.where(favours != "", "raw", "")
        rep_dir = dir_raw
    else:
        tests = np.where(evidence == "order", "order", np.where(
            evidence == "presence", "volume", np.where(evidence == "volume", "raw", "")))
        rep_dir = np.where(evidence == "order", ev["dir_order"],
                           np.where(evidence == "volume", dir_raw, ev["dir_volume"]))
    replication = split_half_replication(
        pres, labels, len(names), tests, rep_dir, alpha=alpha, n_splits=n_replication_splits,
        random_state=random_state, strata=ev["strata"], token_counts=prep["token_counts"],
        lengths=ev.get("lengths"), patterns=patterns.patterns)

    if redundancy is not None:
        lens = patterns.lengths
        order = (np.lexsort((np.arange(m), lens, p)) if redundancy_order == "significance"
                 else np.lexsort((np.arange(m), p, lens)))
        rep = prune_redundant(pres, order, redundancy)
        pids = np.array(table["pattern_id"], dtype=object)
        redundant_of = np.where(rep >= 0, pids[np.maximum(rep, 0)], "")
    else:
        redundant_of = np.full(m, "", dtype=object)

    table["p_value"] = p
    table["q_value"] = q
    table["p_volume"] = ev["p_volume"]
    table["q_volume"] = q_volume
    table["p_order"] = ev["p_order"]
    table["q_order"] = q_order
    table["evidence"] = evidence
    table["favours"] = favours
    if len(names) == 2:
        for col in ("risk_difference", "odds_ratio", "log_odds_ratio", "growth_rate",
                    "cohens_h", "cliffs_delta"):
            table[col] = stats[col]
    else:
        for col in ("chi2", "cramers_v", "kruskal_h"):
            table[col] = stats[col]
    table["p_rate"] = stats["p_rate"]
    table["q_rate"] = q_rate
    table["stability"] = stability
    table["replication"] = replication
    table["redundant_of"] = redundant_of
    df = pd.DataFrame(table)
    df = df.iloc[np.argsort(p, kind="stable")].reset_index(drop=True)
    if drop_redundant:
        df = df[df["redundant_of"] == ""].reset_index(drop=True)
    df.attrs.update(_attrs(prep, correction, alpha, n_permutations, random_state, n_bootstrap,
                           redundancy))
    df.attrs.update(n_replication_splits=n_replication_splits,
                    n_volume_strata=int(ev["n_strata"]))
    return df


def pairwise_contrast(patterns, db=None, *, lengths=None, groups=None, correction="bh",
                      alpha=0.05, rate_unit=None, unit="learner",
                      n_volume_strata=_DEFAULTS["n_volume_strata"]):
    """Two-group comparisons of every pair of groups, as one long table.

    Parameters
    ----------
    patterns, db, lengths, groups, alpha, rate_unit, unit, n_volume_strata
        As in :func:`contrast`.
    correction : {"bh", "holm"}
        Applied over all (pair, pattern) tests together (also to the volume-adjusted
        and the order tests, each a family of its own).

    Returns
    -------
    pandas.DataFrame
        Columns ``group_a``, ``group_b``, ``pattern``, ``length``, ``support_a``,
        ``support_b``, ``rate_a``, ``rate_b``, ``p_value``, ``q_value``, ``p_volume``,
        ``q_volume``, ``p_order``, ``q_order``, ``evidence``, ``favours``,
        ``risk_difference``, ``odds_ratio``, ``log_odds_ratio``, ``growth_rate``,
        ``cohens_h``, ``cliffs_delta``, ``p_rate``, ``q_rate`` (same definitions as
        :func:`contrast`, with A = ``group_a``; activity strata are formed within each
        pair). Pairs follow the group order.
    """
    prep = _prepare_unit(patterns, db, lengths, groups, rate_unit, unit, "pairwise_contrast")
    patterns = prep["patterns"]
    correction = check_choice(correction, "correction", ("bh", "holm"), "pairwise_contrast")
    alpha = check_fraction(alpha, "alpha", "pairwise_contrast")
    names, labels = prep["names"], prep["labels"]
    frames = []
    pnames = patterns.names
    toks = patterns.tokens
    pids, ptoks = [pattern_id(t) for t in toks], [tokens_text(t) for t in toks]
    directions = []
    for ga, gb in itertools.combinations(range(len(names)), 2):
        mask = (labels == ga) | (labels == gb)
        st = _two_group_stats(prep["presence"][mask], prep["rates"][mask],
                              labels[mask] == ga, labels[mask] == gb)
        pair_labels = np.where(labels[mask] == ga, 0, 1).astype(np.int64)
        ev = evidence_tests(
            prep["presence"][mask], pair_labels, 2, patterns.patterns,
            volume=None if prep["volume"] is None else prep["volume"][mask],
            token_counts=None if prep["token_counts"] is None else prep["token_counts"][mask],
            n_strata=n_volume_strata)
        rd = np.sign(st["risk_difference"])
        directions.append((np.where(rd > 0, 0, np.where(rd < 0, 1, -1)), ev["dir_volume"],
                           ev["dir_order"], ev["strata"] is not None))
        frames.append(pd.DataFrame({
            "group_a": names[ga], "group_b": names[gb], "pattern_id": pids, "pattern": pnames,
            "tokens": ptoks,
            "length": patterns.lengths, "support_a": st["support_a"],
            "support_b": st["support_b"], "rate_a": st["rate_a"], "rate_b": st["rate_b"],
            "p_value": st["p_value"], "p_volume": ev["p_volume"], "p_order": ev["p_order"],
            "risk_difference": st["risk_difference"],
            "odds_ratio": st["odds_ratio"], "log_odds_ratio": st["log_odds_ratio"],
            "growth_rate": st["growth_rate"], "cohens_h": st["cohens_h"],
            "cliffs_delta": st["cliffs_delta"], "p_rate": st["p_rate"],
        }))
    df = pd.concat(frames, ignore_index=True)
    q = adjust_pvalues(df["p_value"].to_numpy(), correction)
    q_volume = adjust_pvalues(df["p_volume"].to_numpy(), correction)
    q_order = adjust_pvalues(df["p_order"].to_numpy(), correction)
    df.insert(df.columns.get_loc("p_value") + 1, "q_value", q)
    df.insert(df.columns.get_loc("p_volume") + 1, "q_volume", q_volume)
    df.insert(df.columns.get_loc("p_order") + 1, "q_order", q_order)
    evidence, favours, start = [], [], 0
    for (ga, gb), (d_raw, d_vol, d_ord, has_volume) in zip(
            itertools.combinations(range(len(names)), 2), directions):
        rows = slice(start, start + len(d_raw))
        start += len(d_raw)
        pair = [names[ga], names[gb]]
        if has_volume:
            e, f = classify_evidence(q[rows], q_volume[rows], q_order[rows], d_raw, d_vol,
                                     d_ord, pair, alpha)
        else:  # no activity volumes: no adjustment, favours follows q_value
            nan = np.full(len(d_raw), np.nan)
            _, f = classify_evidence(q[rows], nan, nan, d_raw, d_raw, d_raw, pair, alpha)
            e = np.full(len(d_raw), "", dtype=object)
        evidence.append(e)
        favours.append(f)
    df.insert(df.columns.get_loc("q_order") + 1, "evidence", np.concatenate(evidence))
    df.insert(df.columns.get_loc("evidence") + 1, "favours", np.concatenate(favours))
    df["q_rate"] = adjust_pvalues(df["p_rate"].to_numpy(), correction)
    return df


def sequence_rates(patterns, lengths=None, *, per=100.0):
    """Instance rates per sequence: ``(counts / length) * per`` (sparse, same shape).

    Parameters
    ----------
    patterns : PatternSet
    lengths : array_like, optional
        Length of each sequence; None gives the raw instance counts. Sequences of
        length 0 get rate 0.
    per : float
        Scale (default: occurrences per 100 tokens).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n_sequences, n_patterns)

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> ps = PatternSet(patterns=[(0,)], vocab=["a"], is_pause=[False], group_names=["g"],
    ...                 group_sizes=[2], support_counts=[[2]],
    ...                 counts=sp.csr_matrix([[2], [1]]), seq_groups=[0, 0])
    >>> sequence_rates(ps, [4, 10]).toarray().ravel().tolist()
    [50.0, 10.0]
    """
    counts = sp.csr_matrix(patterns.counts, dtype=np.float64, copy=True)
    if lengths is None:
        return counts
    lengths = np.asarray(lengths, dtype=np.float64)
    rows = np.repeat(np.arange(counts.shape[0]), np.diff(counts.indptr))
    denom = lengths[rows]
    # count / length first, then the scale: equal fractions (1/3, 2/6) give equal
    # floats, so rank ties in the Mann-Whitney test are the mathematical ones
    counts.data = np.where(denom > 0, counts.data / np.where(denom > 0, denom, 1.0), 0.0) * per
    counts.eliminate_zeros()
    return counts


# --------------------------------------------------------------------- helpers
def _prepare_unit(patterns, db, lengths, groups, rate_unit, unit, where):
    """:func:`_prepare` after merging sequences into learners when ``unit='learner'``,
    plus each unit's activity volume and token counts (``volume``, ``token_counts``)."""
    check_choice(unit, "unit", ("learner", "sequence", "auto"), where)
    if unit == "auto":
        unit = "learner"
    merge = (unit == "learner" and db is not None and isinstance(patterns, PatternSet)
             and db.n_sequences == patterns.counts.shape[0]
             and len(np.unique(db.learners)) < db.n_sequences)
    if not merge:
        prep = _prepare(patterns, db, lengths, groups, rate_unit, where,
                        sessions_ok=unit == "learner")
        prep["patterns"] = patterns
        prep["unit"] = unit
        volume, tokens = _unit_activity(db, lengths, None)
        return _with_activity(prep, volume, tokens)
    if rate_unit is None:
        rate_unit = "tokens"
    rate_unit = check_choice(rate_unit, "rate_unit", _RATE_UNITS, where)
    if rate_unit == "tokens":
        seq_len = np.asarray(lengths if lengths is not None else db.lengths)
    elif rate_unit == "actions":
        seq_len = np.bincount(db.seq_index[db.action_mask], minlength=db.n_sequences)
    else:
        seq_len = None
    names, first, inverse = np.unique(db.learners, return_index=True, return_inverse=True)
    rank = np.empty(len(names), dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(names))
    learner_of = rank[inverse.ravel()]
    n_learners = len(names)
    agg = sp.csr_matrix((np.ones(db.n_sequences), (learner_of, np.arange(db.n_sequences))),
                        shape=(n_learners, db.n_sequences))
    seq_groups = patterns.seq_groups
    lg_min = np.full(n_learners, np.iinfo(np.int64).max)
    lg_max = np.full(n_learners, -2)
    np.minimum.at(lg_min, learner_of, seq_groups)
    np.maximum.at(lg_max, learner_of, seq_groups)
    if np.any(lg_min != lg_max):
        bad = str(db.learners[np.flatnonzero((lg_min != lg_max)[learner_of])[0]])
        raise ParameterError(
            f"Learner {bad!r} has sequences in different groups; unit='learner' of {where} "
            f"needs one group per learner (check the outcomes or use unit='sequence').")
    counts = sp.csr_matrix(agg @ sp.csr_matrix(patterns.counts, dtype=np.float64))
    counts.data = np.rint(counts.data)
    counts = counts.astype(np.int64)
    groups_l = lg_min
    n_groups = len(patterns.group_names)
    sup = np.stack([np.asarray((counts[groups_l == g] > 0).sum(axis=0)).ravel()
                    for g in range(n_groups)], axis=1) if n_groups else np.zeros((0, 0))
    merged = PatternSet(
        patterns=patterns.patterns, vocab=patterns.vocab, is_pause=patterns.is_pause,
        group_names=patterns.group_names,
        group_sizes=np.bincount(groups_l[groups_l >= 0], minlength=n_groups),
        support_counts=sup.reshape(patterns.n_patterns, n_groups), counts=counts,
        seq_groups=groups_l, constraints=dict(patterns.constraints))
    len_l = None if seq_len is None else np.asarray(agg @ seq_len.astype(np.float64))
    prep = _prepare(merged, None, len_l, groups, "count" if len_l is None else "tokens", where)
    prep["rate_unit"] = rate_unit
    prep["patterns"] = merged
    prep["unit"] = "learner"
    volume, tokens = _unit_activity(db, lengths, agg)
    return _with_activity(prep, volume, tokens)


def _unit_activity(db, lengths, agg):
    """Events and token counts per sequence (or per learner when ``agg`` merges them).

    Without ``db`` the volume is ``lengths`` (tokens) and there are no token counts.
    """
    if db is None:
        return (None if lengths is None else np.asarray(lengths, dtype=np.float64)), None
    seq = db.seq_index
    events = np.bincount(seq[db.action_mask], minlength=db.n_sequences).astype(np.float64)
    tokens = sp.csr_matrix((np.ones(db.n_tokens), (seq, np.asarray(db.tokens, np.int64))),
                           shape=(db.n_sequences, len(db.vocab)))
    if agg is not None:
        return np.asarray(agg @ events).ravel(), sp.csr_matrix(agg @ tokens)
    return events, tokens


def _with_activity(prep, volume, tokens):
    keep = prep["keep"]
    prep["volume"] = None if volume is None else volume[keep]
    prep["token_counts"] = None if tokens is None else tokens[keep]
    return prep


def _prepare(patterns, db, lengths, groups, rate_unit, where, sessions_ok=False):
    """Validate inputs; restrict to the compared groups; compute presence and rates
    (``sessions_ok``: sequences are known to be one per learner, no warning needed)."""
    if not isinstance(patterns, PatternSet):
        raise ParameterError(
            f"{where} needs a PatternSet (from seqmine.mining.miner or seqmine.match); got "
            f"{type(patterns).__name__}.")
    n_seq = patterns.counts.shape[0]
    if db is not None and db.n_sequences != n_seq:
        raise ParameterError(
            f"The SequenceDB has {db.n_sequences} sequences but the PatternSet was counted on "
            f"{n_seq}; pass the database the patterns were mined or matched on.")
    if lengths is not None:
        lengths = np.asarray(lengths)
        if lengths.shape != (n_seq,):
            raise ParameterError(
                f"'lengths' must have one entry per sequence ({n_seq}); got shape "
                f"{lengths.shape}.")
    if rate_unit is None:
        rate_unit = "tokens" if (db is not None or lengths is not None) else "count"
    rate_unit = check_choice(rate_unit, "rate_unit", _RATE_UNITS, where)
    if rate_unit == "tokens":
        if lengths is None:
            if db is None:
                raise ParameterError(
                    f"rate_unit='tokens' of {where} needs sequence lengths: pass db= or "
                    f"lengths=, or use rate_unit='count'.")
            lengths = db.lengths
    elif rate_unit == "actions":
        if db is None:
            raise ParameterError(
                f"rate_unit='actions' of {where} needs db= (to count action tokens).")
        lengths = np.bincount(db.seq_index[db.action_mask], minlength=n_seq)
    else:
        lengths = None

    all_names = list(patterns.group_names)
    seq_groups = patterns.seq_groups
    sizes_all = np.bincount(seq_groups[seq_groups >= 0], minlength=len(all_names))
    if groups is None:
        chosen = [g for g in range(len(all_names)) if sizes_all[g] > 0]
    else:
        if isinstance(groups, str):
            groups = [groups]
        chosen = []
        for name in groups:
            if name not in all_names:
                raise ParameterError(
                    f"Group {name!r} of {where} is not among the groups "
                    f"{', '.join(map(repr, all_names)) or '(none)'}; check the 'groups' option.")
            chosen.append(all_names.index(name))
        if len(set(chosen)) != len(chosen):
            raise ParameterError(f"The 'groups' option of {where} names a group twice: {groups!r}.")
    if len(chosen) < 2:
        found = ", ".join(repr(all_names[g]) for g in chosen) or "none"
        raise ParameterError(
            f"{where} needs at least two groups with sequences; found {found}. Give "
            f"outcomes that split learners into groups (e.g. a median split on gain).")
    for g in chosen:
        if sizes_all[g] < MIN_GROUP_SIZE:
            raise ParameterError(
                f"Group {all_names[g]!r} has {sizes_all[g]} sequence(s); {where} needs at least "
                f"{MIN_GROUP_SIZE} per compared group. Merge groups or collect more learners.")
    small = [all_names[g] for g in chosen if sizes_all[g] < SMALL_GROUP_SIZE]
    if small:
        warnings.warn(SeqmineWarning(
            f"Group(s) {', '.join(map(repr, small))} have fewer than {SMALL_GROUP_SIZE} "
            f"sequences; the tests have very little power and the effect sizes are unstable.",
            code="small_groups", count=len(small)), stacklevel=3)
    remap = np.full(len(all_names) + 1, -1, dtype=np.int64)
    remap[np.array(chosen)] = np.arange(len(chosen))
    lab_all = np.where(seq_groups >= 0, remap[seq_groups], -1)
    keep = np.flatnonzero(lab_all >= 0)
    labels = lab_all[keep]
    if db is not None and not sessions_ok:
        learners = db.learners[keep]
        if len(np.unique(learners)) < len(learners):
            warnings.warn(SeqmineWarning(
                f"Some learners have several sequences (sessions); {where} treats sequences "
                f"as independent units (session-level tests), which overstates the "
                f"evidence. Use unit='learner' (--contrast-unit learner, the default) for "
                f"learner-level tests.",
                code="sessions_not_independent"), stacklevel=3)
    rates_all = sequence_rates(patterns, lengths)
    presence_all = patterns.presence()
    everything = len(keep) == n_seq
    presence = presence_all if everything else presence_all[keep]
    rates = rates_all if everything else rates_all[keep]
    if patterns.n_patterns and presence.shape[0]:
        k = np.asarray(presence.sum(axis=0)).ravel()
        if np.all((k == 0) | (k == presence.shape[0])):
            warnings.warn(SeqmineWarning(
                "No pattern's presence varies across the compared sequences (each is in "
                "all of them or none); every presence p-value is 1.", code="no_variation"),
                stacklevel=3)
    return {"names": [all_names[g] for g in chosen], "labels": labels, "keep": keep,
            "presence": presence, "rates": rates, "rates_all": rates_all,
            "presence_all": presence_all,
            "rate_unit": rate_unit, "all_names": all_names}


def _base_columns(patterns, rates, prep):
    seq_groups = patterns.seq_groups
    toks = patterns.tokens
    table = {"pattern_id": [pattern_id(t) for t in toks], "pattern": patterns.names,
             "tokens": [tokens_text(t) for t in toks], "length": patterns.lengths}
    names = prep["all_names"]
    sizes = np.bincount(seq_groups[seq_groups >= 0], minlength=len(names))
    with np.errstate(divide="ignore", invalid="ignore"):
        support = np.rint(_group_sums(prep["presence_all"], seq_groups, len(names))) \
            / sizes[:, None]
        rate = _group_sums(prep["rates_all"], seq_groups, len(names)) / sizes[:, None]
    for g, name in enumerate(names):
        table[f"support_{name}"] = support[g]
    for g, name in enumerate(names):
        table[f"rate_{name}"] = rate[g]
    return table


def _group_sums(matrix, labels, n_groups):
    """Column sums of ``matrix`` per group, (n_groups, n_columns), via one sparse product
    (rows with label -1 are left out; no copy of the matrix)."""
    labels = np.asarray(labels, dtype=np.int64)
    rows = np.flatnonzero(labels >= 0)
    ind = sp.csr_matrix((np.ones(len(rows)), (labels[rows], rows)),
                        shape=(n_groups, matrix.shape[0]))
    return np.asarray((ind @ matrix).todense(), dtype=np.float64).reshape(n_groups, -1)


def _two_group_stats(pres, rates, in_a, in_b):
    """Presence test, rate test and effect sizes for group A (in_a) vs B (in_b)."""
    in_a = np.asarray(in_a, dtype=bool)
    in_b = np.asarray(in_b, dtype=bool)
    n1, n2 = int(in_a.sum()), int(in_b.sum())
    lab = np.where(in_a, 0, np.where(in_b, 1, -1))
    a, c = np.rint(_group_sums(pres, lab, 2)).astype(np.int64)
    rate_a, rate_b = _group_sums(rates, lab, 2) / np.array([[n1], [n2]])
    b, d = n1 - a, n2 - c
    pa, pb = a / n1, c / n2
    orr = odds_ratio_haldane(a, b, c, d)
    sel = in_a | in_b
    u1, p_rate = mannwhitney_sparse(rates if sel.all() else rates[sel], in_a[sel])
    return {
        "support_a": pa, "support_b": pb,
        "rate_a": rate_a, "rate_b": rate_b,
        "p_value": fisher_exact_many(a, b, c, d),
        "risk_difference": pa - pb, "odds_ratio": orr, "log_odds_ratio": np.log(orr),
        "growth_rate": growth_rate(pa, pb), "cohens_h": cohens_h(pa, pb),
        "cliffs_delta": 2.0 * u1 / (n1 * n2) - 1.0, "p_rate": p_rate,
    }


def _empty_frame(table, names, correction):
    cols = list(table) + ["p_value", "q_value", "p_volume", "q_volume", "p_order", "q_order",
                          "evidence", "favours"]
    cols += (["risk_difference", "odds_ratio", "log_odds_ratio", "growth_rate", "cohens_h",
              "cliffs_delta"] if len(names) == 2 else ["chi2", "cramers_v", "kruskal_h"])
    cols += ["p_rate", "q_rate", "stability", "replication", "redundant_of"]
    df = pd.DataFrame({c: table.get(c, []) for c in cols})
    df.attrs.update({"groups": list(names), "correction": correction})
    return df


def _attrs(prep, correction, alpha, n_permutations, random_state, n_bootstrap, redundancy):
    return {"groups": list(prep["names"]), "correction": correction, "alpha": alpha,
            "n_permutations": n_permutations if correction == "westfall-young" else 0,
            "random_state": random_state, "n_bootstrap": n_bootstrap,
            "redundancy": redundancy, "rate_unit": prep["rate_unit"],
            "n_sequences": int(len(prep["labels"])), "unit": prep.get("unit", "sequence")}
