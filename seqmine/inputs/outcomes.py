"""Learner outcomes: normalized learning gain and the rules that form outcome groups.

Outcome tables come in three forms, recognised by their columns:

* ``learner, pre, post, max`` -- normalized gain ``g = (post - pre) / (max - pre)``;
* ``learner, score`` -- any numeric outcome, higher is better;
* ``learner, label`` -- the groups are given.

Rule for ``pre == max`` (a learner already at ceiling): the gain is undefined,
so the learner gets no gain and no group; they are listed in the summary under
``outcome_undefined`` (never silently dropped). Negative gains (post < pre) are
kept as they are.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from .._util.checks import check_choice, check_columns, check_fraction
from ..config import DEFAULT_CONFIG
from ..errors import DataFileError, ParameterError
from .readers import read_bytes
from .sources import regular_input

__all__ = [
    "normalized_gain",
    "load_outcomes",
    "Grouping",
    "match_learners",
    "canonical_learner_ids",
    "reconcile_learner_ids",
    "DEFAULT_GROUP_NAMES",
    "MATCH_ID_RULES",
]

#: How learner identifiers of the events and the outcomes are matched: ``exact``
#: (identical text; near matches stop the run with examples), ``numeric`` (ids that are
#: whole numbers match whatever their leading zeros or decimal ``.0``: 1 = 01 = 1.0).
MATCH_ID_RULES = ("exact", "numeric")

_DECIMAL_COMMA = r"[+-]?\d+,\d+"
_WHOLE_NUMBER = re.compile(r"[+-]?0*(\d+)(?:\.0*)?")

#: Group names of the two-group rules: better outcomes first.
DEFAULT_GROUP_NAMES = ("strong", "weak")


def normalized_gain(pre, post, maximum):
    """Normalized learning gain ``(post - pre) / (max - pre)``.

    Parameters
    ----------
    pre, post, maximum : array-like of float

    Returns
    -------
    ndarray of float
        NaN where ``pre == max`` (undefined: no room to gain).

    Notes
    -----
    On percentages this is Hake's (1998) ``<g> = (%post - %pre) / (100 - %pre)``;
    on raw scores it gives the same value whatever the scale.

    Examples
    --------
    >>> normalized_gain([12, 30], [21, 30], [30, 30]).tolist()
    [0.5, nan]
    """
    pre = np.asarray(pre, dtype=float)
    post = np.asarray(post, dtype=float)
    maximum = np.asarray(maximum, dtype=float)
    room = maximum - pre
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(room != 0, (post - pre) / np.where(room != 0, room, 1.0), np.nan)
    return g


def load_outcomes(path, *, columns=None, kind="auto", max_score=None, delimiter=None,
                  decimal_comma=DEFAULT_CONFIG["events"]["decimal_comma"]):
    """Read and check an outcomes table.

    Parameters
    ----------
    path : str or Path
    columns : dict, optional
        Column name for the roles ``learner``, ``pre``, ``post``, ``max``, ``score``,
        ``label``.
    kind : {"auto", "gain", "score", "label"}
        ``auto`` picks ``label`` if that column exists, else ``gain`` if ``pre`` and
        ``post`` exist, else ``score``.
    max_score : float, optional
        Maximum score when the table has no ``max`` column.
    delimiter : str, optional
    decimal_comma : bool
        Read scores written with a decimal comma (``0,5``). Without it such scores stop
        the load with a message that shows them.

    Returns
    -------
    DataFrame
        ``learner`` plus ``pre, post, max, gain`` (gain), ``score`` (score) or
        ``label`` (label); ``outcome_kind`` in ``.attrs``. ``gain`` is NaN where
        ``pre == max``.

    Raises
    ------
    DataFileError
        Missing/empty file, duplicate learners, non-numeric, negative or NaN
        scores, ``post`` or ``pre`` above ``max``.
    """
    check_choice(kind, "kind", ("auto", "gain", "score", "label"), "load_outcomes")
    with regular_input(path, "outcomes") as (regular, shown):
        out = _load_outcomes(regular, columns=columns, kind=kind, max_score=max_score,
                             delimiter=delimiter, decimal_comma=decimal_comma)
    out.attrs["path"] = shown
    return out


def _load_outcomes(path, *, columns, kind, max_score, delimiter, decimal_comma):
    path = Path(path)
    roles = {r: r for r in ("learner", "pre", "post", "max", "score", "label")}
    roles.update({k: v for k, v in (columns or {}).items() if v})
    if not path.is_file():
        raise DataFileError(f"{path}: outcomes file not found; check the path.")
    if path.stat().st_size == 0:
        raise DataFileError(f"{path}: the outcomes file is empty.")
    try:
        # compressed outcomes (.csv.gz, .bz2, .xz) are read like compressed events
        text = read_bytes(path, "outcomes").decode("utf-8-sig")
        header = text.split("\n", 1)[0]
        sep = delimiter
        if sep is None:
            counts = {c: header.count(c) for c in (",", "\t", ";", "|")}
            sep = max(counts, key=counts.get) if max(counts.values()) else ","
        df = pd.read_csv(io.StringIO(text), sep=sep, dtype=str, keep_default_na=False)
    except UnicodeDecodeError:
        raise DataFileError(f"{path}: not valid UTF-8 text; re-save the outcomes as UTF-8.") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise DataFileError(f"{path}: malformed CSV ({' '.join(str(exc).split())}).") from None
    df.columns = [str(c).strip() for c in df.columns]
    if len(df) == 0:
        raise DataFileError(f"{path}: no rows below the header.")
    check_columns(df.columns, [roles["learner"]], str(path), "--outcome-learner-column")
    if kind == "auto":
        if roles["label"] in df.columns:
            kind = "label"
        elif roles["pre"] in df.columns or roles["post"] in df.columns:
            kind = "gain"
        elif roles["score"] in df.columns:
            kind = "score"
        else:
            raise DataFileError(
                f"{path}: cannot tell the outcome form; give columns pre,post,max "
                f"(normalized gain), score, or label (found: {', '.join(df.columns)}).")
    learner = df[roles["learner"]].astype(str).str.strip()
    rows = np.arange(1, len(df) + 1)
    empty = learner == ""
    if empty.any():
        raise DataFileError(
            f"{path}: row {rows[empty.to_numpy()][0]} has an empty learner; fill it in or "
            f"delete the row.")
    dup = learner.duplicated(keep=False).to_numpy()
    if dup.any():
        who = learner[dup].iloc[0]
        where = rows[(learner == who).to_numpy()]
        raise DataFileError(
            f"{path}: learner {who!r} appears on rows {', '.join(map(str, where[:5]))}; keep "
            f"one outcome row per learner.")
    out = pd.DataFrame({"learner": learner.to_numpy(dtype=object)})
    if kind == "label":
        check_columns(df.columns, [roles["label"]], str(path), "--label-column")
        lab = df[roles["label"]].astype(str).str.strip()
        if (lab == "").any():
            r = rows[(lab == "").to_numpy()][0]
            raise DataFileError(f"{path}: row {r} has an empty label; fill it in or delete the row.")
        out["label"] = lab.to_numpy(dtype=object)
    elif kind == "score":
        check_columns(df.columns, [roles["score"]], str(path), "--score-column")
        out["score"] = _numeric(df[roles["score"]], roles["score"], path, rows, decimal_comma)
    else:
        need = [roles["pre"], roles["post"]] + ([] if max_score is not None else [roles["max"]])
        check_columns(df.columns, need, str(path),
                      "--{col}-column (or give --max-score for a fixed maximum)")
        pre = _numeric(df[roles["pre"]], roles["pre"], path, rows, decimal_comma)
        post = _numeric(df[roles["post"]], roles["post"], path, rows, decimal_comma)
        mx = (np.full(len(df), float(max_score)) if max_score is not None
              else _numeric(df[roles["max"]], roles["max"], path, rows, decimal_comma))
        for name, vals in ((roles["pre"], pre), (roles["post"], post)):
            over = vals > mx
            if over.any():
                r = rows[over][0]
                raise DataFileError(
                    f"{path}: row {r}: {name} = {vals[over][0]:g} is above max = {mx[over][0]:g}; "
                    f"correct the score or the maximum.")
        zero = mx <= 0
        if zero.any():
            raise DataFileError(f"{path}: row {rows[zero][0]}: max must be positive.")
        out["pre"], out["post"], out["max"] = pre, post, mx
        out["gain"] = normalized_gain(pre, post, mx)
    out.attrs["outcome_kind"] = kind
    out.attrs["path"] = str(path)
    return out


def _numeric(series, name, path, rows, decimal_comma=False):
    s = series.astype(str).str.strip()
    comma = s.str.fullmatch(_DECIMAL_COMMA).to_numpy(dtype=bool)
    if comma.any() and decimal_comma:
        s = s.where(~comma, s.str.replace(",", ".", regex=False))
    elif comma.any():
        shown = ", ".join(f"row {rows[i]}: {s.iloc[i]!r}" for i in np.flatnonzero(comma)[:3])
        raise DataFileError(
            f"{path}: column '{name}' has {int(comma.sum())} number(s) written with a decimal "
            f"comma ({shown}); re-save the file with decimal points (0.5) or pass "
            f"--decimal-comma.")
    vals = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(vals)
    if bad.any():
        r = rows[bad][0]
        raise DataFileError(
            f"{path}: row {r}: {name} = {s.iloc[int(np.flatnonzero(bad)[0])]!r} is not a number; "
            f"fill in the score or delete the row.")
    neg = vals < 0
    if neg.any():
        raise DataFileError(
            f"{path}: row {rows[neg][0]}: {name} = {vals[neg][0]:g} is negative; scores must be >= 0.")
    return vals


class Grouping(BaseEstimator):
    """Form outcome groups from gains, scores or labels.

    Parameters
    ----------
    rule : {"median", "fraction", "thresholds", "label"}
        ``median``: ``strong`` above the median of the training learners, ``weak`` at or
        below it. ``fraction``: the top ``fraction`` are ``strong``, the bottom
        ``fraction`` ``weak``, the middle gets no group (e.g. 1/3 for thirds).
        ``thresholds``: ``weak`` below ``low``, ``strong`` at or above ``high``, the
        rest no group. ``label``: the ``label`` column gives the groups.
    fraction : float in (0, 0.5]
    low, high : float
    names : tuple of str
        Names for (better, worse) groups of the numeric rules.
    value : {"auto", "gain", "score"}
        Column the numeric rules use.

    Attributes
    ----------
    group_names_ : list of str
    thresholds_ : dict
        The learned cut points (``low``, ``high``).

    Examples
    --------
    >>> out = pd.DataFrame({"learner": list("abcd"), "gain": [0.1, 0.5, 0.2, 0.9]})
    >>> Grouping().fit(out).transform(out).tolist()
    ['weak', 'strong', 'weak', 'strong']
    """

    def __init__(self, rule="median", *, fraction=DEFAULT_CONFIG["outcomes"]["fraction"],
                 low=DEFAULT_CONFIG["outcomes"]["low"], high=DEFAULT_CONFIG["outcomes"]["high"],
                 names=DEFAULT_GROUP_NAMES, value="auto"):
        self.rule = rule
        self.fraction = fraction
        self.low = low
        self.high = high
        self.names = names
        self.value = value

    def _values(self, outcomes):
        value = self.value
        if value == "auto":
            value = "gain" if "gain" in outcomes.columns else "score"
        if value not in outcomes.columns:
            raise ParameterError(
                f"Grouping rule {self.rule!r} needs a numeric '{value}' column in the outcomes; "
                f"give pre/post/max or score columns, or use the label rule.")
        return outcomes[value].to_numpy(dtype=float)

    def fit(self, outcomes):
        """Learn the cut points from ``outcomes`` (training learners only)."""
        check_choice(self.rule, "rule", ("median", "fraction", "thresholds", "label"), "Grouping")
        if self.rule == "label":
            if "label" not in outcomes.columns:
                raise ParameterError("The label grouping rule needs a 'label' column in the outcomes.")
            self.group_names_ = sorted(pd.unique(outcomes["label"]).tolist())
            self.thresholds_ = {}
            return self
        if len(self.names) != 2 or self.names[0] == self.names[1]:
            raise ParameterError(f"Group names must be two different names; got {self.names!r}.")
        vals = self._values(outcomes)
        vals = vals[np.isfinite(vals)]
        if len(vals) < 2:
            raise ParameterError(
                f"Only {len(vals)} learner(s) have a defined outcome; grouping needs at least 2.")
        if self.rule == "median":
            m = float(np.median(vals))
            self.thresholds_ = {"low": m, "high": m}
        elif self.rule == "fraction":
            f = check_fraction(self.fraction, "fraction", "Grouping")
            if f > 0.5:
                raise ParameterError(
                    f"The 'fraction' parameter of Grouping must be a float in (0, 0.5]. Got {f} instead.")
            self.thresholds_ = {"low": float(np.quantile(vals, f)),
                                "high": float(np.quantile(vals, 1 - f))}
        else:
            if self.low is None or self.high is None or not self.low <= self.high:
                raise ParameterError(
                    "The thresholds rule needs low <= high (e.g. --low 0.3 --high 0.7).")
            self.thresholds_ = {"low": float(self.low), "high": float(self.high)}
        self.group_names_ = list(self.names)
        return self

    def transform(self, outcomes):
        """Group name of each learner: a Series indexed by learner, in the row order of
        ``outcomes`` (NaN = no group), so it can be passed as ``groups`` to the encoder."""
        if not hasattr(self, "group_names_"):
            from ..errors import NotFittedError
            raise NotFittedError("This Grouping is not fitted yet; call fit first.")
        if self.rule == "label":
            lab = outcomes["label"].astype(object)
            return pd.Series(np.where(lab.isin(self.group_names_), lab, np.nan),
                             index=pd.Index(outcomes["learner"].to_numpy(), name="learner"),
                             dtype=object, name="group")
        vals = self._values(outcomes)
        lo, hi = self.thresholds_["low"], self.thresholds_["high"]
        better, worse = self.group_names_
        out = np.full(len(vals), np.nan, dtype=object)
        if self.rule == "median":
            out[vals > hi] = better
            out[vals <= lo] = worse
        elif self.rule == "fraction":
            out[vals >= hi] = better
            out[vals <= lo] = worse
        else:
            out[vals >= hi] = better
            out[vals < lo] = worse
        return pd.Series(out, index=pd.Index(outcomes["learner"].to_numpy(), name="learner"),
                         dtype=object, name="group")

    def fit_transform(self, outcomes):
        """``fit`` then ``transform``."""
        return self.fit(outcomes).transform(outcomes)


def match_learners(events, outcomes, groups):
    """Reconcile learners between events and outcomes.

    Returns
    -------
    mapping : dict learner -> group name (only learners with events and a group)
    report : dict
        ``events_without_outcome``, ``outcomes_without_events``,
        ``outcome_undefined`` (gain undefined), ``no_group`` (outcome but between
        the cut points) -- each a sorted list of learner ids -- and
        ``learners_per_group``.
    """
    ev_learners = set(pd.unique(events["learner"]))
    out_learners = set(outcomes["learner"])
    g = pd.Series(groups.to_numpy(), index=outcomes["learner"].to_numpy())
    undefined = set()
    if "gain" in outcomes.columns:
        undefined = set(outcomes.loc[~np.isfinite(outcomes["gain"].to_numpy(float)), "learner"])
    has_group = g.notna()
    mapping = {k: v for k, v in g[has_group].items() if k in ev_learners}
    no_group = sorted(set(g.index[~has_group.to_numpy()]) - undefined)
    per_group = pd.Series(list(mapping.values()), dtype=object).value_counts()
    report = {
        "events_without_outcome": sorted(ev_learners - out_learners),
        "outcomes_without_events": sorted(out_learners - ev_learners),
        "outcome_undefined": sorted(undefined),
        "no_group": no_group,
        "learners_per_group": {str(k): int(v) for k, v in sorted(per_group.items())},
    }
    return mapping, report


def canonical_learner_ids(values):
    """Ids that are whole numbers written as their plain integer (``01``, ``1.0`` -> ``1``).

    Other ids are returned unchanged.

    Examples
    --------
    >>> canonical_learner_ids(["01", "40.0", "+7", "L01", "1.5"]).tolist()
    ['1', '40', '7', 'L01', '1.5']
    """
    s = pd.Series(np.asarray(values, dtype=object)).astype(str)
    m = s.str.fullmatch(_WHOLE_NUMBER.pattern)
    digits = s.str.extract(_WHOLE_NUMBER.pattern + "$", expand=False)
    neg = s.str.startswith("-") & (digits.fillna("").str.strip("0") != "")
    out = np.where(m, np.where(neg, "-", "") + digits.fillna(""), s)
    return pd.Series(out, dtype=object).to_numpy(dtype=object)


def reconcile_learner_ids(events, outcomes, match_ids=DEFAULT_CONFIG["outcomes"]["match_ids"], *,
                          events_source="events", outcomes_source="outcomes"):
    """Events and outcomes with learner ids matched by ``match_ids``; near matches stop.

    With ``match_ids="numeric"`` both tables' ids become :func:`canonical_learner_ids`.
    Then, among the ids found in only one of the tables, any pair that differs only in
    how the id is written (leading zeros, a decimal ``.0``, letter case, surrounding
    white space) stops the run: reading them as different learners would silently
    lose both.

    Returns
    -------
    events, outcomes : DataFrame

    Raises
    ------
    DataFileError
        Naming examples from both files and the fix.

    Examples
    --------
    >>> ev = pd.DataFrame({"learner": ["01", "02"]})
    >>> oc = pd.DataFrame({"learner": ["1", "2"]})
    >>> reconcile_learner_ids(ev, oc, "numeric")[0]["learner"].tolist()
    ['1', '2']
    """
    check_choice(match_ids, "match_ids", MATCH_ID_RULES, "reconcile_learner_ids")
    if match_ids == "numeric":
        events = events.assign(learner=canonical_learner_ids(events["learner"]))
        kind = outcomes.attrs.get("outcome_kind")
        attrs = dict(outcomes.attrs)
        outcomes = outcomes.assign(learner=canonical_learner_ids(outcomes["learner"]))
        outcomes.attrs.update(attrs, outcome_kind=kind)
        dup = outcomes["learner"].duplicated(keep=False)
        if dup.any():
            raise DataFileError(
                f"{outcomes_source}: with --match-ids numeric the ids "
                f"{sorted(map(str, outcomes['learner'][dup].unique()))[:3]} stand for more "
                f"than one row; keep one outcome row per learner.")
    ev_ids = pd.unique(events["learner"].astype(str))
    oc_ids = pd.unique(outcomes["learner"].astype(str))
    only_ev = sorted(set(ev_ids) - set(oc_ids))
    only_oc = sorted(set(oc_ids) - set(ev_ids))
    if not only_ev or not only_oc:
        return events, outcomes
    def key(ids):
        return pd.Series(canonical_learner_ids([i.strip() for i in ids])).str.casefold().tolist()
    oc_by_key = {}
    for k, i in zip(key(only_oc), only_oc):
        oc_by_key.setdefault(k, i)
    pairs = [(e, oc_by_key[k]) for k, e in zip(key(only_ev), only_ev) if k in oc_by_key]
    if not pairs:
        return events, outcomes
    shown = ", ".join(f"events {e!r} vs outcomes {o!r}" for e, o in pairs[:3])
    numeric = all(canonical_learner_ids([e])[0] == canonical_learner_ids([o])[0]
                  for e, o in pairs)
    fix = ("make the ids identical in both files, or pass --match-ids numeric to read 1, "
           "01 and 1.0 as the same learner" if numeric and match_ids == "exact" else
           "make the ids identical in both files (same case and spelling)")
    raise DataFileError(
        f"{events_source} and {outcomes_source}: {len(pairs)} learner id(s) almost match "
        f"but differ in how they are written ({shown}); {fix}.")
