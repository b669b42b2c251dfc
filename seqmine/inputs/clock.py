"""Times of an event log: units, local zones and what the clock can tell.

Numbers in the time column are seconds unless they are clearly something else, and
the choice is always said out loud:

* numbers between 10^11 and 4.1 x 10^12 are milliseconds since 1970, between 10^14
  and 4.1 x 10^15 microseconds since 1970 (seconds since 1970 lie between 10^8 and
  4.1 x 10^9; all three bands end in 2100);
* small whole numbers (relative times) whose typical gap within a learner is 600 or
  more are read as milliseconds (600 s, ten minutes between two actions, is rare in
  interaction logs; 600 ms is common); at least 20 gaps are needed to judge;
* a column holding numbers of two of the epoch bands stops the load with example
  rows: it mixes units, and reading it either way would lose learners.

``time_unit`` (``--time-unit``) overrides the guess: ``"s"``, ``"ms"`` or ``"us"``.

ISO 8601 times without a zone are UTC unless ``timezone`` (an IANA name such as
``Europe/Berlin``) says where they were recorded. Local times that a daylight-saving
change makes ambiguous (the repeated hour in autumn) or missing (the skipped hour in
spring) follow Python's :mod:`zoneinfo` with ``fold=0``: both are read with the UTC
offset in force *before* the change. An ambiguous time is thus taken as its first
occurrence, and a missing time lands as far after the change as it lies after the
skipped hour's start (02:30 on a night that jumps from 02:00 to 03:00 becomes 03:30).
Both kinds are counted and reported.

All gap arithmetic downstream is in whole microseconds (:func:`to_microseconds`), so a
gap that lies exactly on a pause-bin edge or on the session gap falls on the same side
offline and live.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .._util.checks import check_choice
from .._util.isotime import iso_seconds
from ..errors import DataFileError, ParameterError

__all__ = [
    "TIME_UNITS",
    "TimeColumn",
    "read_times",
    "to_microseconds",
    "resolve_timezone",
    "local_to_utc_seconds",
    "diagnose_clock",
    "RESOLUTIONS",
    "TIED_SHARE_WARNING",
    "RELATIVE_MS_MEDIAN_GAP",
]

#: Accepted values of ``time_unit`` and how many of them make one second.
TIME_UNITS = {"auto": None, "s": 1, "ms": 1_000, "us": 1_000_000}

#: Clock resolutions tried by :func:`diagnose_clock`, coarsest first (name, microseconds).
RESOLUTIONS = (("day", 86_400_000_000), ("hour", 3_600_000_000), ("minute", 60_000_000),
               ("second", 1_000_000), ("millisecond", 1_000), ("microsecond", 1))

#: Share of tied consecutive events (same learner, same time) above which a run warns
#: that their order is only the file order (our rule, see docs/input-formats.md).
TIED_SHARE_WARNING = 0.05

#: Typical (median) gap at or above which small whole-number times are read as
#: milliseconds when ``time_unit="auto"`` (our rule, see the module docstring).
RELATIVE_MS_MEDIAN_GAP = 600

#: Fewest gaps from which relative whole-number times may be judged to be milliseconds.
_MIN_GAPS_FOR_UNIT = 20
_T_MAX = 4_102_444_800.0  # 2100-01-01T00:00:00Z in seconds since 1970
_EPOCH_BANDS = (("s", 1e8, _T_MAX), ("ms", 1e11, _T_MAX * 1e3), ("us", 1e14, _T_MAX * 1e6))
_UNIT_WORDS = {"s": "seconds", "ms": "milliseconds", "us": "microseconds"}
_EPOCH = pd.Timestamp("1970-01-01", tz="UTC")
_FAST_ISO = r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,9})?)?)?Z?"
_ZONED = r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)\s*$"
_DECIMAL_COMMA = r"[+-]?\d+,\d+"


@dataclass
class TimeColumn:
    """Parsed times and how they were read (see :func:`read_times`).

    Attributes
    ----------
    seconds : ndarray of float64
        Seconds (since 1970 for ISO 8601 and epoch numbers); NaN where unusable.
    reason : ndarray of object
        ``None`` or a reject reason code per value.
    detail : ndarray of object
        Text for ``rejects.csv`` (``""`` when none).
    kind : {"iso", "numeric"}
    unit : {"s", "ms", "us"} or None
        How numbers were read (None for ISO 8601).
    unit_assumed : str
        A sentence saying what was guessed, or ``""`` when nothing was guessed.
    timezone : str or None
    n_ambiguous, n_missing : int
        Local times at a daylight-saving change that were ambiguous or did not exist.
    """

    seconds: np.ndarray
    reason: np.ndarray
    detail: np.ndarray
    kind: str = "numeric"
    unit: str | None = "s"
    unit_assumed: str = ""
    timezone: str | None = None
    n_ambiguous: int = 0
    n_missing: int = 0
    examples: dict = field(default_factory=dict)


def to_microseconds(seconds):
    """Seconds (float or array) as whole microseconds (int or int64 array).

    The one rounding rule used by the encoder and the live watcher, so both put a gap
    that lies exactly on an edge on the same side.

    Examples
    --------
    >>> to_microseconds(1767225610.123)
    1767225610123000
    >>> to_microseconds(np.array([0.1 + 0.2, 0.3])).tolist()
    [300000, 300000]
    """
    if isinstance(seconds, np.ndarray):
        return np.rint(seconds * 1e6).astype(np.int64)
    return int(round(float(seconds) * 1e6))


def resolve_timezone(name, where="timezone"):
    """The :class:`zoneinfo.ZoneInfo` of an IANA name, or None for None/"" /"UTC"-less input.

    Raises
    ------
    ParameterError
        For a name the time-zone database does not know.
    """
    if name is None or name == "":
        return None
    import zoneinfo
    try:
        return zoneinfo.ZoneInfo(str(name))
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, OSError):
        raise ParameterError(
            f"Unknown time zone {name!r} for the '{where}' option; use an IANA name such as "
            f"'Europe/Berlin' or 'America/New_York' (install the 'tzdata' package if this "
            f"system has no time-zone database).") from None


def local_to_utc_seconds(local_ns, zone):
    """Seconds since 1970 (UTC) of naive local times, with the daylight-saving rule.

    Parameters
    ----------
    local_ns : ndarray of int64
        Naive local wall-clock times as nanoseconds since 1970-01-01T00:00 (local).
    zone : zoneinfo.ZoneInfo

    Returns
    -------
    seconds : ndarray of float64
    ambiguous, missing : ndarray of bool
        Times that occur twice / never on that day's clock.

    Notes
    -----
    Ordinary times go through pandas' vectorised ``tz_localize``; the few at a change
    are read one by one with :mod:`zoneinfo` and ``fold=0`` (the offset in force before
    the change), which is the documented rule.

    Examples
    --------
    >>> import zoneinfo
    >>> z = zoneinfo.ZoneInfo("Europe/Berlin")
    >>> local = np.array(["2026-03-29T01:59", "2026-03-29T02:30", "2026-10-25T02:30"],
    ...                  dtype="datetime64[ns]").astype(np.int64)
    >>> s, amb, miss = local_to_utc_seconds(local, z)
    >>> [str(np.datetime64(int(x), "s")) for x in s]
    ['2026-03-29T00:59:00', '2026-03-29T01:30:00', '2026-10-25T00:30:00']
    >>> amb.tolist(), miss.tolist()
    ([False, False, True], [False, True, False])
    """
    local_ns = np.asarray(local_ns, dtype=np.int64)
    idx = pd.DatetimeIndex(local_ns.astype("datetime64[ns]"))
    amb_flag = pd.DatetimeIndex(idx).tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
    utc_ns = amb_flag.asi8.copy()
    odd = np.asarray(amb_flag.isna())
    ambiguous = np.zeros(len(local_ns), dtype=bool)
    missing = np.zeros(len(local_ns), dtype=bool)
    if odd.any():
        from datetime import datetime, timedelta, timezone
        pos = np.flatnonzero(odd)
        uniq, inv = np.unique(local_ns[pos], return_inverse=True)
        vals = np.empty(len(uniq), dtype=np.int64)
        kinds = np.empty(len(uniq), dtype=np.int8)
        for k, ns in enumerate(uniq.tolist()):
            wall = datetime(1970, 1, 1) + timedelta(microseconds=ns // 1000)
            first = wall.replace(tzinfo=zone, fold=0)
            second = wall.replace(tzinfo=zone, fold=1)
            back = first.astimezone(timezone.utc).astimezone(zone).replace(tzinfo=None)
            # a missing time does not survive the round trip; an ambiguous one does,
            # but its two folds have different offsets
            kinds[k] = 2 if back != wall else (1 if first.utcoffset() != second.utcoffset() else 0)
            vals[k] = ns - (first.utcoffset() // timedelta(microseconds=1)) * 1000
        utc_ns[pos] = vals[inv]
        ambiguous[pos] = kinds[inv] == 1
        missing[pos] = kinds[inv] == 2
    return _ns_to_seconds(utc_ns), ambiguous, missing


def read_times(values, *, time_unit="auto", timezone=None, decimal_comma=False,
               learners=None, source="time", path="events"):
    """Parse a time column: ISO 8601 or numbers, with units, zones and decimal commas.

    Parameters
    ----------
    values : array-like of str
    time_unit : {"auto", "s", "ms", "us"}
        What one number stands for; ``auto`` guesses (see the module docstring).
    timezone : str, optional
        IANA zone of naive ISO 8601 times (default: UTC).
    decimal_comma : bool
        Read ``12,5`` as 12.5. Without it, numbers written with a decimal comma stop the
        load with a message that shows them.
    learners : array-like, optional
        Learner of each value; lets ``auto`` look at gaps within learners.
    source, path : str
        Column and file named in messages.

    Returns
    -------
    TimeColumn

    Examples
    --------
    >>> tc = read_times(["1767225610123", "1767225611123"])
    >>> tc.unit, tc.seconds.tolist()
    ('ms', [1767225610.123, 1767225611.123])
    >>> read_times(["2026-03-29 02:30"], timezone="Europe/Berlin").n_missing
    1
    """
    check_choice(time_unit, "time_unit", tuple(TIME_UNITS), "read_times")
    zone = resolve_timezone(timezone)
    s = (values if isinstance(values, pd.Series) else
         pd.Series(np.asarray(values, dtype=object))).astype("string").fillna("").str.strip()
    s = s.reset_index(drop=True)
    n = len(s)
    fast = _fast_iso(s, zone)
    if fast is not None:
        secs, amb, miss = fast
        return _finish_iso(secs, amb, miss, timezone)
    reason = np.full(n, None, dtype=object)
    detail = np.full(n, "", dtype=object)
    missing = (s == "").to_numpy()
    reason[missing] = "missing_time"
    text = s.where(~pd.Series(missing), None)
    comma = text.str.fullmatch(_DECIMAL_COMMA).fillna(False).to_numpy(dtype=bool)
    if decimal_comma:
        text = text.where(~pd.Series(comma), text.str.replace(",", ".", regex=False))
    num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
    is_num = ~np.isnan(num) & ~missing
    decimal_comma = bool(decimal_comma)
    rest = ~missing & ~is_num & ~(comma & (not decimal_comma))
    iso = np.full(n, np.nan)
    amb = np.zeros(n, bool)
    miss = np.zeros(n, bool)
    if rest.any():
        iso[rest], amb[rest], miss[rest] = _general_iso(s[rest], zone)
    is_iso = ~np.isnan(iso)
    kind = "iso" if is_iso.sum() > is_num.sum() else "numeric"
    if kind == "numeric" and comma.any() and not decimal_comma:
        rows = np.flatnonzero(comma)[:3] + 1
        shown = ", ".join(f"row {r}: {s.iloc[r - 1]!r}" for r in rows)
        raise DataFileError(
            f"{path}: column '{source}' has {int(comma.sum()):,} number(s) written with a "
            f"decimal comma ({shown}); re-save the file with decimal points (12.5) or pass "
            f"--decimal-comma.")
    reason[~missing & ~is_num & ~is_iso] = "bad_time"
    if kind == "iso":
        reason[is_num] = "mixed_time_format"
        detail[is_num] = "the column is mostly ISO 8601"
        out = is_iso & ((iso < 0) | (iso > _T_MAX))
        reason[out] = "time_out_of_range"
        seconds = np.where(reason == None, iso, np.nan)  # noqa: E711 (elementwise)
        return TimeColumn(seconds=seconds, reason=reason, detail=detail, kind="iso",
                          unit=None, timezone=timezone,
                          n_ambiguous=int((amb & (reason == None)).sum()),  # noqa: E711
                          n_missing=int((miss & (reason == None)).sum()))  # noqa: E711
    reason[is_iso] = "mixed_time_format"
    detail[is_iso] = "the column is mostly numbers"
    unit, assumed, band = _numeric_unit(num, is_num, time_unit, learners, source, path, s)
    per_second = TIME_UNITS[unit]
    seconds = num / per_second if per_second != 1 else num.copy()
    out = is_num & (~np.isfinite(seconds) | (np.abs(seconds) > _T_MAX))
    if band is not None:
        stray = is_num & ~band & ~out
        out |= stray
        detail[stray] = f"not {_UNIT_WORDS[unit]} since 1970 like the rest of the column"
    reason[out] = "time_out_of_range"
    seconds[reason != None] = np.nan  # noqa: E711
    return TimeColumn(seconds=seconds, reason=reason, detail=detail, kind="numeric",
                      unit=unit, unit_assumed=assumed, timezone=timezone)


def diagnose_clock(learners, seconds):
    """What the clock of a log can tell: resolution and tied consecutive events.

    Parameters
    ----------
    learners : array-like
        Learner of each event; a learner's events are consecutive.
    seconds : array-like of float
        Times; events of a learner in time order (ties in file order).

    Returns
    -------
    dict
        ``resolution`` (name from :data:`RESOLUTIONS`), ``resolution_seconds``,
        ``pairs`` (consecutive event pairs of one learner), ``tied_pairs`` and
        ``tied_share``.

    Examples
    --------
    >>> d = diagnose_clock(["a"] * 4 + ["b"] * 3, [0, 60, 60, 180, 0, 120, 240])
    >>> d["resolution"], d["tied_pairs"], d["pairs"]
    ('minute', 1, 5)
    """
    t = to_microseconds(np.asarray(seconds, dtype=float))
    who = np.asarray(learners, dtype=object)
    same = (who[1:] == who[:-1]).astype(bool) if len(who) > 1 else np.zeros(0, bool)
    diffs = (t[1:] - t[:-1])[same]
    pairs = int(len(diffs))
    tied = int((diffs == 0).sum())
    moving = diffs[diffs != 0]
    probe = moving if len(moving) >= 20 else t
    name, size = "microsecond", 1
    for cand, unit in RESOLUTIONS:
        if len(probe) and np.mean(probe % unit == 0) >= 0.99:
            name, size = cand, unit
            break
    return {"resolution": name, "resolution_seconds": size / 1e6, "pairs": pairs,
            "tied_pairs": tied, "tied_share": (tied / pairs) if pairs else 0.0}


# ------------------------------------------------------------------ internals
def _fast_iso(s, zone):
    """(seconds, ambiguous, missing) for a column that is all naive or 'Z' ISO 8601
    (the common case), else None. numpy parses such strings about ten times faster than
    the general ISO 8601 path."""
    if len(s) == 0 or not s.str.fullmatch(_FAST_ISO).all():
        return None
    utc = s.str.endswith("Z").to_numpy(dtype=bool)
    text = s.str.removesuffix("Z").str.replace(" ", "T", regex=False)
    try:
        stamps = np.array(text.to_numpy(dtype=object).astype(str), dtype="datetime64[ns]")
    except ValueError:
        return None
    ns = stamps.astype(np.int64)
    secs = _ns_to_seconds(ns)
    amb = np.zeros(len(s), bool)
    miss = np.zeros(len(s), bool)
    if zone is not None and not utc.all():
        local = ~utc
        secs[local], amb[local], miss[local] = local_to_utc_seconds(ns[local], zone)
    return secs, amb, miss


def _ns_to_seconds(ns):
    """Seconds from whole nanoseconds, rounded as Python's ``datetime.timestamp`` rounds
    whole microseconds (nanoseconds since 1970 exceed what a float holds exactly)."""
    us, rest = np.divmod(np.asarray(ns, dtype=np.int64), 1000)
    out = us / 1e6
    if rest.any():
        out = out + rest / 1e9
    return out


def _general_iso(strings, zone):
    """Seconds of ISO 8601 strings of any form; NaN where unreadable.

    Zoned and naive strings are parsed apart (pandas before 3 gives naive strings the
    offset of the zoned ones when both are in one call); strings pandas cannot hold
    (before pandas 3: years outside 1677-2262) are read with the standard library, so
    that they are reported as out of range, not garbled.
    """
    out = np.full(len(strings), np.nan)
    amb = np.zeros(len(strings), bool)
    miss = np.zeros(len(strings), bool)
    zoned = np.array(strings.str.contains(_ZONED, na=False), dtype=bool)
    for part in ((zoned, ~zoned) if zone is None else (zoned,)):
        if part.any():
            parsed = pd.to_datetime(strings[part], format="ISO8601", utc=True, errors="coerce")
            out[part] = ((parsed - _EPOCH) / pd.Timedelta(seconds=1)).to_numpy(dtype=float)
    aware = zoned if zone is not None else np.ones(len(strings), dtype=bool)
    naive = ~aware
    if naive.any():
        parsed = pd.to_datetime(strings[naive], format="ISO8601", errors="coerce")
        ok = parsed.notna().to_numpy()
        vals = np.full(int(naive.sum()), np.nan)
        a = np.zeros(len(vals), bool)
        m = np.zeros(len(vals), bool)
        if ok.any():
            ns = parsed[ok].to_numpy().astype("datetime64[ns]").astype(np.int64)
            vals[ok], a[ok], m[ok] = local_to_utc_seconds(ns, zone)
        out[naive], amb[naive], miss[naive] = vals, a, m
    looks_iso = np.array(strings.str.match(r"\s*[+-]?\d{4}-\d{2}-\d{2}", na=False), dtype=bool)
    for i in np.flatnonzero(np.isnan(out) & looks_iso & aware):
        try:
            out[i] = iso_seconds(strings.iat[i])
        except (ValueError, OverflowError):
            pass
    return out, amb, miss


def _finish_iso(secs, amb, miss, timezone):
    n = len(secs)
    reason = np.full(n, None, dtype=object)
    out = (secs < 0) | (secs > _T_MAX)
    reason[out] = "time_out_of_range"
    secs = np.where(out, np.nan, secs)
    return TimeColumn(seconds=secs, reason=reason, detail=np.full(n, "", dtype=object),
                      kind="iso", unit=None, timezone=timezone,
                      n_ambiguous=int((amb & ~out).sum()), n_missing=int((miss & ~out).sum()))


def _numeric_unit(num, is_num, time_unit, learners, source, path, text):
    """How numbers are read: ``(unit, sentence said when guessed, band mask or None)``.

    The band mask, when not None, marks the values that belong to the column's epoch
    unit; the others (a stray value of another unit) are rejected, never read as a time
    in 1970.
    """
    vals = np.abs(num)
    bands = {u: is_num & (vals >= lo) & (vals <= hi) for u, lo, hi in _EPOCH_BANDS}
    n_num = int(is_num.sum())
    relative = is_num & (vals < _EPOCH_BANDS[0][1])
    if time_unit != "auto":
        # numbers of another unit since 1970 are rejected, never read as 1970 or 2500
        other = np.zeros(len(num), bool)
        for u, m in bands.items():
            if u != time_unit:
                other |= m
        return time_unit, "", (~other if bands[time_unit].any() else None)
    if not n_num:
        return "s", "", None
    counts = {u: int(m.sum()) for u, m in bands.items()}
    top = max(counts, key=counts.get)
    if relative.sum() >= counts[top]:
        # relative times: seconds unless whole numbers with minute-long typical gaps
        whole = np.all(np.floor(vals[relative]) == vals[relative])
        if whole and learners is not None:
            gap = _median_gap(np.asarray(learners, dtype=object)[relative], num[relative])
            if gap is not None and gap >= RELATIVE_MS_MEDIAN_GAP:
                return "ms", (f"Column '{source}' holds whole numbers with a typical gap of "
                              f"{gap:,.0f} between a learner's actions; read as milliseconds "
                              f"(relative times). Pass --time-unit s if they are seconds."), None
        return "s", "", None
    others = [u for u, c in counts.items() if u != top and c >= max(1, 0.01 * n_num)]
    if others:
        rows = np.flatnonzero
        shown = "; ".join(
            f"{_UNIT_WORDS[u]}: " + ", ".join(f"row {r + 1}: {text.iloc[r]}"
                                              for r in rows(bands[u])[:2])
            for u in [top, *others])
        raise DataFileError(
            f"{path}: column '{source}' mixes units of time since 1970 ({shown}); reading "
            f"it one way would lose the other rows. Convert the column to one unit, or "
            f"pass --time-unit s, ms or us to keep only the rows in that unit (the others "
            f"go to rejects.csv).")
    if top == "s":
        return "s", "", bands["s"]
    example = vals[bands[top]][0]
    when = pd.Timestamp(example / TIME_UNITS[top], unit="s", tz="UTC")
    return top, (f"Column '{source}' holds numbers such as {example:.0f}; read as "
                 f"{_UNIT_WORDS[top]} since 1970 ({when.isoformat().replace('+00:00', 'Z')}). "
                 f"Pass --time-unit s (or ms, us) if that is wrong."), bands[top]


def _median_gap(learners, values):
    """Median of the positive gaps between a learner's consecutive times, or None."""
    df = pd.DataFrame({"l": learners, "t": values}).sort_values(["l", "t"], kind="mergesort")
    codes = pd.factorize(df["l"])[0]
    t = df["t"].to_numpy(float)
    same = codes[1:] == codes[:-1]
    d = (t[1:] - t[:-1])[same]
    d = d[d > 0]
    return float(np.median(d)) if len(d) >= _MIN_GAPS_FOR_UNIT else None
