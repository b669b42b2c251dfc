"""Load and validate event logs; every unusable row goes to a rejects table.

Supported inputs: CSV/TSV (delimiter sniffed when the header does not split),
Parquet (needs pyarrow: ``pip install seqmine[parquet]``), JSON Lines, and
learning-activity statements in the open xAPI JSON form (actor -> learner,
verb -> action, object -> target, timestamp -> time, context.registration -> session).
Text formats may be gzip-compressed (``.csv.gz`` ...); they are read directly.

Row numbers: ``source_row`` 1 is the first data record of the file (the header
line is not counted; for xAPI and JSON Lines, the first statement / line). A record
with the wrong number of fields is rejected (``bad_fields``) and its detail names its
physical line in the file (the header is line 1).

Times: see :mod:`seqmine.inputs.clock` (units, local zones, what the clock can tell).
What the loader noticed or assumed is raised as :class:`~seqmine.errors.SeqmineWarning`
with a code: ``time_unit_assumed``, ``ambiguous_local_times``, ``missing_local_times``,
``coarse_times``, ``tied_times``, ``duplicates_at_coarse_resolution``, ``many_rejected``
and ``heavy_learner``.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .._util.checks import check_choice, check_columns
from .._util.text import CONTROL_CHARACTERS
from ..config import DEFAULT_CONFIG, EVENT_ROLES
from ..errors import ColumnError, DataFileError, ParameterError, SeqmineWarning
from . import readers
from .clock import TIED_SHARE_WARNING, TIME_UNITS, diagnose_clock, read_times, resolve_timezone
from .sources import regular_input

__all__ = [
    "LoadResult",
    "load_events",
    "parse_times",
    "EVENT_ROLES",
    "REJECT_REASONS",
    "MAX_ACTION_LENGTH",
    "MEMORY_PER_INPUT_BYTE",
    "MANY_REJECTED_SHARE",
    "HEAVY_LEARNER_RATIO",
]

#: Reject reason codes written to ``rejects.csv``.
REJECT_REASONS = {
    "bad_fields": "the record has more or fewer fields than the header (the detail names its line)",
    "missing_learner": "the learner identifier is empty",
    "missing_action": "the action is empty",
    "missing_time": "the time is empty",
    "bad_time": "the time is neither ISO 8601 nor a number",
    "mixed_time_format": "the time format differs from the rest of the column",
    "time_out_of_range": "the time lies before 1970 or after 2100 (or is not finite)",
    "control_characters": "the learner or action contains control characters",
    "action_too_long": "the action is longer than the limit",
    "duplicate_event": "the same learner, time, action, target, session and channel as an earlier row",
    "bad_json": "the line is not a JSON object",
    "bad_statement": "the xAPI statement lacks actor, verb or timestamp",
}

#: Longest accepted action name (characters); longer names are rejected.
MAX_ACTION_LENGTH = 200

#: Share of rejected rows above which a run warns (``many_rejected``).
MANY_REJECTED_SHARE = 0.10

#: A learner with more than this many times the median number of events per learner
#: (and at least 1,000 events) is reported (``heavy_learner``).
HEAVY_LEARNER_RATIO = 20

#: Largest input file read without ``max_bytes`` raised (bytes).
DEFAULT_MAX_BYTES = DEFAULT_CONFIG["events"]["max_bytes"]

#: Working memory per byte of input while loading and encoding (measured 25-40x on
#: CSV logs; see docs/reliability.md). With the default ``max_bytes``, a file that
#: would need more than the machine's memory stops before it is read.
MEMORY_PER_INPUT_BYTE = 40
_DEFAULT_LIMITS = (DEFAULT_MAX_BYTES, 20_000_000_000)  # the API's and the command line's

_FORMATS = readers.FORMATS
#: Clock resolutions too coarse to order a learner's actions within a session.
_COARSE = ("minute", "hour", "day")
#: Fewest consecutive event pairs before the clock is judged (tiny logs say little).
_MIN_PAIRS = 50
_MIN_ROWS_FOR_SHARE = 20
_HEAVY_MIN_EVENTS = 1000


@dataclass
class LoadResult:
    """What :func:`load_events` returns.

    Attributes
    ----------
    events : DataFrame
        Columns ``learner, time, action, session, target, channel, source_row``;
        ``time`` is float seconds (Unix epoch for ISO 8601 and epoch numbers); sorted by
        learner then time, stable on ties (file order).
    rejects : DataFrame
        Columns ``source_row, reason, detail``; one row per unusable input row.
    n_input : int
        Rows read from the file; ``len(events) + len(rejects) == n_input``.
    time_kind : str
        ``"iso"`` or ``"numeric"``.
    n_out_of_order : int
        Rows whose time was earlier than the previous row of the same learner in
        file order (they were sorted into place, not dropped).
    clock : dict
        How times were read and what the clock can tell: ``time_unit``,
        ``time_unit_assumed``, ``timezone``, ``ambiguous_local_times``,
        ``missing_local_times``, ``resolution``, ``resolution_seconds``, ``tied_share``.
    """

    events: pd.DataFrame
    rejects: pd.DataFrame
    n_input: int
    path: str = ""
    time_kind: str = "numeric"
    n_out_of_order: int = 0
    notes: list = field(default_factory=list)
    clock: dict = field(default_factory=dict)

    @property
    def n_kept(self):
        """Rows kept."""
        return len(self.events)

    @property
    def n_rejected(self):
        """Rows rejected."""
        return len(self.rejects)

    def time_settings(self):
        """How live events must be read to match this log: ``{"unit", "timezone"}``."""
        return {"unit": self.clock.get("time_unit") or "s",
                "timezone": self.clock.get("timezone")}

    def summary(self):
        """Row accounting as a plain dict."""
        reasons = self.rejects["reason"].value_counts().sort_index()
        return {
            "rows_in": int(self.n_input),
            "rows_kept": int(self.n_kept),
            "rows_rejected": int(self.n_rejected),
            "rejects_by_reason": {str(k): int(v) for k, v in reasons.items()},
            "rows_out_of_order": int(self.n_out_of_order),
            "time_kind": self.time_kind,
            "clock": dict(self.clock),
            "learners": int(self.events["learner"].nunique()) if len(self.events) else 0,
        }


def load_events(path, *, columns=None, format=DEFAULT_CONFIG["events"]["format"],
                delimiter=DEFAULT_CONFIG["events"]["delimiter"],
                encoding=DEFAULT_CONFIG["events"]["encoding"],
                duplicates=DEFAULT_CONFIG["events"]["duplicates"],
                max_action_length=MAX_ACTION_LENGTH,
                max_bytes=DEFAULT_MAX_BYTES,
                time_unit=DEFAULT_CONFIG["events"]["time_unit"],
                timezone=DEFAULT_CONFIG["events"]["timezone"],
                decimal_comma=DEFAULT_CONFIG["events"]["decimal_comma"]):
    """Read an event log, validate every row and return kept and rejected rows.

    Parameters
    ----------
    path : str or Path
        The events file (text formats may be gzip-compressed).
    columns : dict, optional
        Column name for each role (``learner``, ``time``, ``action``, ``session``,
        ``target``, ``channel``); defaults are the role names.
    format : {"csv", "tsv", "parquet", "jsonl", "xapi"}, optional
        Guessed from the extension when omitted (``.json`` holding statements is xAPI;
        a ``.gz`` ending is looked through).
    delimiter : str, optional
        CSV delimiter; sniffed from the header when omitted.
    encoding : str
        Text encoding (a UTF-8 byte-order mark is skipped).
    duplicates : {"reject", "keep"}
        Whether exact duplicate events after the first are rejected.
    max_action_length : int
        Longer action names are rejected (``action_too_long``).
    max_bytes : int
        Files larger than this fail at once with a message naming the option.
    time_unit : {"auto", "s", "ms", "us"}
        What a numeric time stands for; ``auto`` recognises epoch milliseconds and
        microseconds and relative milliseconds and says so (``time_unit_assumed``).
    timezone : str, optional
        IANA zone (e.g. ``"Europe/Berlin"``) of ISO 8601 times written without a zone;
        default UTC. Daylight-saving rule: see :mod:`seqmine.inputs.clock`.
    decimal_comma : bool
        Read numeric times written with a decimal comma (``12,5``).

    Returns
    -------
    LoadResult

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "ev.csv"
    >>> _ = p.write_text("learner,time,action\\nb,5,run\\na,2,set\\nb,1,set\\n,3,x\\n")
    >>> res = load_events(p)
    >>> res.events[["learner", "time", "action", "source_row"]].values.tolist()
    [['a', 2.0, 'set', 2], ['b', 1.0, 'set', 3], ['b', 5.0, 'run', 1]]
    >>> res.rejects[["source_row", "reason"]].values.tolist()
    [[4, 'missing_learner']]
    """
    check_choice(duplicates, "duplicates", ("reject", "keep"), "load_events")
    check_choice(time_unit, "time_unit", tuple(TIME_UNITS), "load_events")
    resolve_timezone(timezone)
    with regular_input(path, "events", max_bytes=max_bytes) as (regular, shown):
        result = _load_events(regular, columns=columns, format=format, delimiter=delimiter,
                              encoding=encoding, duplicates=duplicates,
                              max_action_length=max_action_length, max_bytes=max_bytes,
                              times={"time_unit": time_unit, "timezone": timezone,
                                     "decimal_comma": decimal_comma})
    result.path = shown
    return result


def _load_events(path, *, columns, format, delimiter, encoding, duplicates, max_action_length,
                 max_bytes, times):
    if delimiter in ("\\t", "tab", "TAB"):  # a tab typed on a command line
        delimiter = "\t"
    if delimiter is not None and (not isinstance(delimiter, str) or len(delimiter) != 1
                                  or delimiter in "\"\r\n"):
        raise ParameterError(f"The delimiter must be one character such as ',' ';' or a tab; "
                             f"got {delimiter!r}.")
    path = Path(path)
    cols = _resolve_columns(columns)
    if not path.exists():
        raise DataFileError(f"{path}: file not found; check the path.")
    if path.is_dir():
        raise DataFileError(f"{path}: is a folder, not an events file.")
    size = path.stat().st_size
    if size == 0:
        raise DataFileError(f"{path}: the file is empty; export the event log again.")
    if size > max_bytes:
        raise DataFileError(
            f"{path}: {size:,} bytes is above the {int(max_bytes):,}-byte limit; "
            f"split the log by learners or raise the limit with --max-bytes.")
    if max_bytes in _DEFAULT_LIMITS:
        _check_memory(path, readers.uncompressed_size(path, size))
    fmt = format or readers.guess_format(path)
    check_choice(fmt, "format", _FORMATS, "load_events")
    if fmt in ("csv", "tsv"):
        raw = readers.read_delimited(path, fmt, delimiter, encoding)
    elif fmt == "parquet":
        raw = readers.read_parquet(path)
    elif fmt == "jsonl":
        raw = readers.read_jsonl(path, encoding)
    else:
        raw = readers.read_xapi(path, encoding)
    return _validate(raw, cols, path, duplicates, max_action_length, times)


def parse_times(values, *, source="time", time_unit="auto", timezone=None):
    """Parse a column of times to float seconds.

    Accepts numbers or ISO 8601 (with or without zone; times without a zone are taken
    as UTC, or as local times of ``timezone``; times with one are converted to UTC).
    When the column mixes both forms, the form of the majority wins and the others are
    marked ``mixed_time_format``. Numbers are seconds unless ``time_unit`` says
    otherwise or, with ``"auto"``, they are clearly milliseconds or microseconds since
    1970 (see :mod:`seqmine.inputs.clock`).

    Parameters
    ----------
    values : array-like of str
    source : str
        Name used in messages.
    time_unit : {"auto", "s", "ms", "us"}
    timezone : str, optional

    Returns
    -------
    seconds : ndarray of float64 (NaN where unusable)
    reason : ndarray of object (None, or a reject reason code)
    kind : {"iso", "numeric"}

    Examples
    --------
    >>> s, r, k = parse_times(["2026-01-01T00:00:10Z", "2026-01-01T01:00:10+01:00", "x"])
    >>> (float(s[1] - s[0]), list(r), k)
    (0.0, [None, None, 'bad_time'], 'iso')
    """
    tc = read_times(values, time_unit=time_unit, timezone=timezone, source=source)
    return tc.seconds, tc.reason, tc.kind


# ---------------------------------------------------------------- internals
def _resolve_columns(columns):
    cols = {role: role for role in EVENT_ROLES}
    if columns:
        unknown = set(columns) - set(EVENT_ROLES)
        if unknown:
            raise ParameterError(
                f"Unknown column role(s) {sorted(unknown)}; the roles are "
                f"{', '.join(EVENT_ROLES)}.")
        cols.update({k: v for k, v in columns.items() if v})
    return cols


def _physical_memory():
    """Bytes of memory this process may use (machine or container limit), or None."""
    total = None
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (AttributeError, ValueError, OSError):  # not POSIX
        pass
    for limit_file in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(limit_file).read_text().strip()
        except OSError:
            continue
        if text.isdigit() and int(text) > 0:
            total = min(total, int(text)) if total else int(text)
    return total or None


def _check_memory(path, size):
    total = _physical_memory()
    need = size * MEMORY_PER_INPUT_BYTE
    if total is not None and need > total:
        raise DataFileError(
            f"{path}: loading {size / 1e6:,.0f} MB needs about {need / 1e9:,.1f} GB of memory "
            f"(about {MEMORY_PER_INPUT_BYTE}x the file size) but {total / 1e9:,.1f} GB are "
            f"available; split the log by learners, or pass --max-bytes to load it anyway.")


def _validate(raw, cols, path, duplicates, max_action_length, times):
    n = len(raw)
    if n == 0:
        raise DataFileError(f"{path}: no data rows below the header; export the event log again.")
    bad_rows = {r: (v if isinstance(v, tuple) else (v, ""))
                for r, v in dict(raw.attrs.get("bad_rows", {})).items()}
    present = list(raw.columns)
    if bad_rows and len(bad_rows) == n:
        first = bad_rows[min(bad_rows)]
        raise DataFileError(
            f"{path}: none of the {n} records could be read "
            f"({sorted({c for c, _d in bad_rows.values()})[0]}"
            f"{'; ' + first[1] if first[1] else ''}); check the file format"
            f"{' and --delimiter' if first[0] == 'bad_fields' else ''}.")
    required = [cols[r] for r, req in EVENT_ROLES.items() if req]
    try:
        check_columns(present, required, str(path), option_hint="--{col}-column")
    except ColumnError as exc:
        # name the role's option rather than the column when they differ
        msg = str(exc)
        for role in EVENT_ROLES:
            msg = msg.replace(f"--{cols[role]}-column", f"--{role}-column")
        if len(present) == 1 and any(c in present[0] for c in ",;\t|"):
            msg += " The header looks like one column; pass --delimiter."
        raise ColumnError(msg) from None

    def col(role):
        name = cols[role]
        if name in raw.columns:
            return raw[name].astype("string").fillna("").str.strip()
        return pd.Series(np.full(n, "", dtype=object), dtype="string")

    lser, aser = col("learner"), col("action")
    learner, action = lser.to_numpy(dtype=object), aser.to_numpy(dtype=object)
    session, target, channel = (col(r).to_numpy(dtype=object) for r in ("session", "target", "channel"))
    source_row = np.arange(1, n + 1, dtype=np.int64)
    unreadable = np.zeros(n, dtype=bool)
    unreadable[np.array(sorted(bad_rows), dtype=np.int64) - 1] = True
    tcol = col("time")
    if unreadable.any():  # their (empty) cells must not count as missing times
        tcol = tcol.where(~pd.Series(unreadable), "0")
    tc = read_times(tcol, learners=learner, source=cols["time"], path=str(path), **times)
    seconds, reason, detail = tc.seconds, tc.reason, tc.detail
    # one reason per row: unreadable records first, then the time problems found by
    # read_times, then the learner/action checks below in their listed order
    for r, (code, text) in bad_rows.items():
        reason[r - 1] = code
        detail[r - 1] = text
    seconds[unreadable] = np.nan
    checks = [
        ("missing_learner", (lser == "").to_numpy()),
        ("missing_action", (aser == "").to_numpy()),
        ("control_characters", (lser.str.contains(CONTROL_CHARACTERS, regex=True)
                                | aser.str.contains(CONTROL_CHARACTERS, regex=True)
                                ).to_numpy(dtype=bool)),
        ("action_too_long", (aser.str.len() > max_action_length).to_numpy(dtype=bool)),
    ]
    for code, mask in checks:
        reason[mask & pd.isna(reason)] = code
    m = reason == "action_too_long"
    detail[m] = [f"{len(a)} characters > {max_action_length}" for a in action[m]]
    ok = pd.isna(reason)
    n_dup = 0
    if duplicates == "reject" and ok.any():
        idx = np.flatnonzero(ok)
        key = pd.DataFrame({"l": learner[idx], "t": seconds[idx], "a": action[idx],
                            "s": session[idx], "g": target[idx], "c": channel[idx]})
        dup = key.duplicated(keep="first").to_numpy()
        if dup.any():
            first = key.groupby(list(key.columns), sort=False, dropna=False).ngroup().to_numpy()
            first_row = pd.Series(source_row[idx]).groupby(first).transform("min").to_numpy()
            didx = idx[dup]
            reason[didx] = "duplicate_event"
            detail[didx] = [f"same as row {r}" for r in first_row[dup]]
            ok[didx] = False
            n_dup = int(dup.sum())
    bad = ~ok
    events = pd.DataFrame({
        "learner": pd.array(learner[ok], dtype=object),
        "time": seconds[ok],
        "action": pd.array(action[ok], dtype=object),
        "session": pd.array(session[ok], dtype=object),
        "target": pd.array(target[ok], dtype=object),
        "channel": pd.array(channel[ok], dtype=object),
        "source_row": source_row[ok],
    })
    n_ooo = _count_out_of_order(events)
    events = events.sort_values(["learner", "time"], kind="mergesort").reset_index(drop=True)
    rejects = pd.DataFrame({
        "source_row": source_row[bad],
        "reason": reason[bad].astype(str),
        "detail": detail[bad].astype(str),
    })
    if len(events) + len(rejects) != n:  # row accounting is a hard invariant
        raise RuntimeError(f"row accounting broken: {len(events)} + {len(rejects)} != {n}")
    if len(events) == 0:
        top = rejects["reason"].value_counts().index[0]
        raise DataFileError(
            f"{path}: all {n} rows were rejected (most often: {top} - "
            f"{REJECT_REASONS.get(top, top)}); {_all_rejected_hint(top, tc, times)}")
    clock = {"time_unit": tc.unit, "time_unit_assumed": bool(tc.unit_assumed),
             "timezone": tc.timezone, "ambiguous_local_times": tc.n_ambiguous,
             "missing_local_times": tc.n_missing}
    clock.update(diagnose_clock(events["learner"].to_numpy(object), events["time"].to_numpy(float)))
    _warn_about_load(path, cols, tc, clock, events, rejects, n, n_dup)
    return LoadResult(events=events, rejects=rejects, n_input=n, path=os.fspath(path),
                      time_kind=tc.kind, n_out_of_order=n_ooo, clock=clock)


def _all_rejected_hint(top, tc, times):
    if top == "time_out_of_range" and tc.kind == "numeric" and times["time_unit"] != "auto":
        return ("the numbers do not fit the unit given with --time-unit; try --time-unit "
                "auto, or s, ms or us.")
    return "check the column options and the time format."


def _warn_about_load(path, cols, tc, clock, events, rejects, n, n_dup):
    """The loader's warnings (codes in the module docstring)."""
    def warn(code, message, count=None):
        warnings.warn(SeqmineWarning(message, code=code, count=count), stacklevel=4)

    if tc.unit_assumed:
        warn("time_unit_assumed", f"{path}: {tc.unit_assumed}", len(events))
    if tc.n_ambiguous:
        warn("ambiguous_local_times",
             f"{path}: {tc.n_ambiguous:,} local time(s) fall in the hour repeated when "
             f"{tc.timezone} leaves daylight-saving time; each was read as its first "
             f"occurrence (the offset before the change).", tc.n_ambiguous)
    if tc.n_missing:
        warn("missing_local_times",
             f"{path}: {tc.n_missing:,} local time(s) fall in the hour skipped when "
             f"{tc.timezone} starts daylight-saving time; each was read with the offset "
             f"before the change (02:30 becomes 03:30).", tc.n_missing)
    res = clock["resolution"]
    judged = clock["pairs"] >= _MIN_PAIRS
    if judged and res in _COARSE:
        warn("coarse_times",
             f"{path}: times in column '{cols['time']}' are recorded to the {res}; gaps "
             f"shorter than a {res} cannot be measured, and actions within the same "
             f"{res} keep their file order.", len(events))
    if judged and clock["tied_share"] > TIED_SHARE_WARNING:
        warn("tied_times",
             f"{path}: {clock['tied_share']:.0%} of consecutive events of a learner share "
             f"their time stamp ({clock['tied_pairs']:,} of {clock['pairs']:,} pairs); "
             f"their order is the file order, so 'ordered' patterns among them follow the "
             f"export, not the learner.", clock["tied_pairs"])
    if judged and n_dup and (res in _COARSE or (res == "second" and n_dup >= 0.01 * n)):
        warn("duplicates_at_coarse_resolution",
             f"{path}: {n_dup:,} row(s) were rejected as duplicates, but the clock only "
             f"records whole {res}s, so separate actions in the same {res} look identical; "
             f"if they are separate actions, pass --duplicates keep.", n_dup)
    if n >= _MIN_ROWS_FOR_SHARE and len(rejects) > MANY_REJECTED_SHARE * n:
        top = rejects["reason"].value_counts()
        warn("many_rejected",
             f"{path}: {len(rejects):,} of {n:,} rows ({len(rejects) / n:.0%}) were "
             f"rejected, most often {top.index[0]} ({int(top.iloc[0]):,} rows); see "
             f"rejects.csv.", len(rejects))
    per = events["learner"].value_counts(sort=False)
    if len(per) >= 3:
        med = float(per.median())
        heavy = per[(per >= _HEAVY_MIN_EVENTS) & (per > HEAVY_LEARNER_RATIO * med)]
        if len(heavy):
            top_learner = heavy.sort_values(ascending=False, kind="mergesort").index[0]
            warn("heavy_learner",
                 f"{path}: learner {str(top_learner)!r} has {int(heavy[top_learner]):,} "
                 f"events, {heavy[top_learner] / med:,.0f} times the median of {med:,.0f} "
                 f"per learner ({len(heavy)} such learner(s)); pause bins weigh every "
                 f"learner equally, but such a learner dominates mining time and "
                 f"transition counts; check whether it is a test account or a script.",
                 len(heavy))


def _count_out_of_order(events):
    if len(events) < 2:
        return 0
    # running maximum of the earlier rows of the same learner, in file order
    by = events["learner"]
    running = events.groupby(by, sort=False)["time"].cummax()
    previous = running.groupby(by, sort=False).shift(1)
    return int((events["time"] < previous).sum())
