"""Load and validate event logs; every unusable row goes to a rejects table.

Supported inputs: CSV/TSV (delimiter sniffed when the header does not split),
Parquet (needs pyarrow: ``pip install seqmine[parquet]``), JSON Lines, and
learning-activity statements in the open xAPI JSON form (actor -> learner,
verb -> action, object -> target, timestamp -> time, context.registration -> session).

Row numbers: ``source_row`` 1 is the first data record of the file (the header
line is not counted; for xAPI and JSON Lines, the first statement / line).
"""

from __future__ import annotations

import codecs
import io
import json
import mmap
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .._util.checks import check_choice, check_columns
from .._util.isotime import iso_seconds
from .._util.text import CONTROL_CHARACTERS
from ..config import DEFAULT_CONFIG, EVENT_ROLES
from ..errors import ColumnError, DataFileError, ParameterError

__all__ = [
    "LoadResult",
    "load_events",
    "parse_times",
    "EVENT_ROLES",
    "REJECT_REASONS",
    "MAX_ACTION_LENGTH",
    "MEMORY_PER_INPUT_BYTE",
]

#: Column roles of an event table and whether they are required.

#: Reject reason codes written to ``rejects.csv``.
REJECT_REASONS = {
    "missing_learner": "the learner identifier is empty",
    "missing_action": "the action is empty",
    "missing_time": "the time is empty",
    "bad_time": "the time is neither ISO 8601 nor numeric seconds",
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

#: Largest input file read without ``max_bytes`` raised (bytes).
DEFAULT_MAX_BYTES = DEFAULT_CONFIG["events"]["max_bytes"]

#: Working memory per byte of input while loading and encoding (measured 25-40x on
#: CSV logs; see docs/reliability.md). With the default ``max_bytes``, a file that
#: would need more than the machine's memory stops before it is read.
MEMORY_PER_INPUT_BYTE = 40
_DEFAULT_LIMITS = (DEFAULT_MAX_BYTES, 20_000_000_000)  # the API's and the command line's

_EPOCH = pd.Timestamp("1970-01-01", tz="UTC")
_T_MIN = 0.0
_T_MAX = (pd.Timestamp("2100-01-01", tz="UTC") - _EPOCH).total_seconds()
_FORMATS = ("csv", "tsv", "parquet", "jsonl", "xapi")


@dataclass
class LoadResult:
    """What :func:`load_events` returns.

    Attributes
    ----------
    events : DataFrame
        Columns ``learner, time, action, session, target, channel, source_row``;
        ``time`` is float seconds (Unix epoch for ISO 8601 input); sorted by learner
        then time, stable on ties (file order).
    rejects : DataFrame
        Columns ``source_row, reason, detail``; one row per unusable input row.
    n_input : int
        Rows read from the file; ``len(events) + len(rejects) == n_input``.
    time_kind : str
        ``"iso"`` or ``"numeric"``.
    n_out_of_order : int
        Rows whose time was earlier than the previous row of the same learner in
        file order (they were sorted into place, not dropped).
    """

    events: pd.DataFrame
    rejects: pd.DataFrame
    n_input: int
    path: str = ""
    time_kind: str = "numeric"
    n_out_of_order: int = 0
    notes: list = field(default_factory=list)

    @property
    def n_kept(self):
        """Rows kept."""
        return len(self.events)

    @property
    def n_rejected(self):
        """Rows rejected."""
        return len(self.rejects)

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
            "learners": int(self.events["learner"].nunique()) if len(self.events) else 0,
        }


def load_events(path, *, columns=None, format=DEFAULT_CONFIG["events"]["format"],
                delimiter=DEFAULT_CONFIG["events"]["delimiter"],
                encoding=DEFAULT_CONFIG["events"]["encoding"],
                duplicates=DEFAULT_CONFIG["events"]["duplicates"],
                max_action_length=MAX_ACTION_LENGTH,
                max_bytes=DEFAULT_MAX_BYTES):
    """Read an event log, validate every row and return kept and rejected rows.

    Parameters
    ----------
    path : str or Path
        The events file.
    columns : dict, optional
        Column name for each role (``learner``, ``time``, ``action``, ``session``,
        ``target``, ``channel``); defaults are the role names.
    format : {"csv", "tsv", "parquet", "jsonl", "xapi"}, optional
        Guessed from the extension when omitted (``.json`` holding statements is xAPI).
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
        _check_memory(path, size)
    fmt = format or _guess_format(path)
    check_choice(fmt, "format", _FORMATS, "load_events")
    if fmt in ("csv", "tsv"):
        raw = _read_delimited(path, fmt, delimiter, encoding)
    elif fmt == "parquet":
        raw = _read_parquet(path)
    elif fmt == "jsonl":
        raw = _read_jsonl(path, encoding)
    else:
        raw = _read_xapi(path, encoding)
    return _validate(raw, cols, path, duplicates, max_action_length)


def parse_times(values, *, source="time"):
    """Parse a column of times to float seconds.

    Accepts numeric seconds or ISO 8601 (with or without zone; times without a
    zone are taken as UTC, times with one are converted to UTC). When the column
    mixes both forms, the form of the majority wins and the others are marked
    ``mixed_time_format``.

    Parameters
    ----------
    values : array-like of str
    source : str
        Name used in messages.

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
    s = (values if isinstance(values, pd.Series) else
         pd.Series(np.asarray(values, dtype=object))).astype("string").str.strip()
    n = len(s)
    fast = _fast_iso(s)
    if fast is not None:
        reason = np.full(n, None, dtype=object)
        out = (fast < _T_MIN) | (fast > _T_MAX)
        reason[out] = "time_out_of_range"
        fast[out] = np.nan
        return fast, reason, "iso"
    seconds = np.full(n, np.nan)
    reason = np.full(n, None, dtype=object)
    missing = (s.isna() | (s == "")).to_numpy()
    reason[missing] = "missing_time"
    num = pd.to_numeric(s.where(~pd.Series(missing)), errors="coerce").to_numpy(dtype=float)
    is_num = ~np.isnan(num) & ~missing
    rest = ~missing & ~is_num
    iso = np.full(n, np.nan)
    if rest.any():
        # naive and zoned strings parsed apart: pandas before 3 gives naive strings the
        # offset of the zoned ones when both are in one call
        zoned = s.str.contains(r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)\s*$",
                               na=False).to_numpy(dtype=bool)
        for part in (rest & zoned, rest & ~zoned):
            if part.any():
                parsed = pd.to_datetime(s[part], format="ISO8601", utc=True, errors="coerce")
                iso[np.flatnonzero(part)] = ((parsed - _EPOCH) / pd.Timedelta(seconds=1)
                                             ).to_numpy(dtype=float)
        # pandas before 3 parses in nanoseconds (years 1677-2262 only): read the others
        # with the standard library so that they are reported as out of range, not garbled
        looks_iso = s.str.match(r"\s*[+-]?\d{4}-\d{2}-\d{2}", na=False).to_numpy(dtype=bool)
        for i in np.flatnonzero(rest & np.isnan(iso) & looks_iso):
            try:
                iso[i] = iso_seconds(s.iat[i])
            except (ValueError, OverflowError):
                pass
    is_iso = ~np.isnan(iso)
    kind = "iso" if is_iso.sum() > is_num.sum() else "numeric"
    reason[~missing & ~is_num & ~is_iso] = "bad_time"
    if kind == "iso":
        seconds[is_iso] = iso[is_iso]
        reason[is_num] = "mixed_time_format"
        out = is_iso & ((iso < _T_MIN) | (iso > _T_MAX))
    else:
        seconds[is_num] = num[is_num]
        reason[is_iso] = "mixed_time_format"
        out = is_num & (~np.isfinite(num) | (np.abs(num) > _T_MAX))
    reason[out] = "time_out_of_range"
    seconds[reason != None] = np.nan  # noqa: E711  (elementwise comparison)
    return seconds, reason, kind


# ---------------------------------------------------------------- internals
_FAST_ISO = r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,9})?)?)?Z?"


def _fast_iso(s):
    """Seconds for a column that is all UTC/naive ISO 8601 (the common case), else None.

    numpy parses such strings about ten times faster than the general ISO 8601 path;
    anything else (offsets, gaps, other forms) goes the general way.
    """
    if len(s) == 0 or not s.str.fullmatch(_FAST_ISO).all():
        return None
    text = s.str.removesuffix("Z").str.replace(" ", "T", regex=False)
    try:
        stamps = np.array(text.to_numpy(dtype=object).astype(str), dtype="datetime64[ns]")
    except ValueError:
        return None
    return (stamps - np.datetime64("1970-01-01T00:00:00", "ns")) / np.timedelta64(1, "s")


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


def _guess_format(path):
    name = path.name.lower()
    if name.endswith((".tsv", ".tab")):
        return "tsv"
    if name.endswith((".parquet", ".pq")):
        return "parquet"
    if name.endswith((".jsonl", ".ndjson")):
        return "jsonl"
    if name.endswith(".json"):
        return "xapi"
    return "csv"


def _without_nul(path, encoding):
    """``path``, or its bytes with NUL replaced by U+0001 when the file holds NUL bytes.

    pandas' C parser (before pandas 3) ends a field at a NUL byte, which would silently
    shorten a value such as ``open\x00chart``; as U+0001 the row keeps its length and is
    rejected as ``control_characters`` like any other control character. Only for
    encodings in which NUL is the single byte 0 (UTF-16 files contain NUL bytes anyway).
    """
    try:
        name = codecs.lookup(encoding).name
    except LookupError:
        return path
    if ("\x00".encode("utf-8" if name == "utf-8-sig" else name) != b"\x00"):
        return path
    with open(path, "rb") as fh:
        try:
            view = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ)
        except (ValueError, OSError):  # empty file, or not mappable (pipe)
            return path
        with view:
            if view.find(b"\x00") == -1:
                return path
            return io.BytesIO(view[:].replace(b"\x00", b"\x01"))


def _read_delimited(path, fmt, delimiter, encoding):
    enc = "utf-8-sig" if encoding.lower().replace("_", "-") in ("utf-8", "utf8") else encoding
    try:
        with open(path, encoding=enc, newline="") as fh:
            header = fh.readline()
    except UnicodeDecodeError:
        raise DataFileError(_decode_message(path, encoding)) from None
    except LookupError:
        raise ParameterError(f"Unknown text encoding {encoding!r}; use e.g. utf-8 or latin-1.") from None
    if not header.strip():
        raise DataFileError(f"{path}: the first line (header) is empty; the file needs a header row.")
    sep = delimiter or ("\t" if fmt == "tsv" else ",")
    if delimiter is None:
        counts = {c: header.count(c) for c in (",", "\t", ";", "|")}
        if counts.get(sep, 0) == 0 and max(counts.values()) > 0:
            sep = max(counts, key=counts.get)
    source = _without_nul(path, enc)
    try:
        df = pd.read_csv(source, sep=sep, dtype=str, keep_default_na=False, na_values=[],
                         encoding=enc, skip_blank_lines=True, engine="c")
    except UnicodeDecodeError:
        raise DataFileError(_decode_message(path, encoding)) from None
    except pd.errors.EmptyDataError:
        raise DataFileError(f"{path}: no columns found; is the file empty?") from None
    except pd.errors.ParserError as exc:
        msg = " ".join(str(exc).split())
        raise DataFileError(
            f"{path}: malformed {fmt.upper()} ({msg}); fix the quoting or the number of "
            f"fields on that line, or pass --delimiter.") from None
    df.columns = [str(c).strip() for c in df.columns]
    return df


def _read_parquet(path):
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise DataFileError(
            f"{path}: reading Parquet needs pyarrow; install it with "
            f"'pip install seqmine[parquet]'.") from None
    try:
        pf = pq.ParquetFile(path)
        # read by row groups to keep peak memory near one group plus the result
        parts = [pf.read_row_group(i).to_pandas() for i in range(pf.num_row_groups)]
    except Exception as exc:  # pyarrow raises several unrelated types
        raise DataFileError(f"{path}: not a readable Parquet file ({type(exc).__name__}).") from None
    df = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
    return _stringify(df)


def _stringify(df):
    out = {}
    for c in df.columns:
        col = df[c]
        if pd.api.types.is_datetime64_any_dtype(col):
            aware = getattr(col.dt, "tz", None) is not None
            # zone-aware times are written in UTC ("Z"); naive ones stay naive (= UTC)
            vals = (col.dt.tz_convert("UTC") if aware else col).dt.strftime(
                "%Y-%m-%dT%H:%M:%S.%f") + ("Z" if aware else "")
            out[str(c)] = vals.fillna("")
        else:
            out[str(c)] = col.astype("string").fillna("").astype(str)
    return pd.DataFrame(out)


def _iter_lines(path, encoding):
    enc = "utf-8-sig" if encoding.lower().replace("_", "-") in ("utf-8", "utf8") else encoding
    try:
        with open(path, encoding=enc) as fh:
            for line in fh:
                yield line
    except UnicodeDecodeError:
        raise DataFileError(_decode_message(path, encoding)) from None


def _read_jsonl(path, encoding):
    records, bad = [], []
    row = 0
    for line in _iter_lines(path, encoding):
        if not line.strip():
            continue
        row += 1
        obj = _json_or_none(line)
        if not isinstance(obj, dict):
            bad.append(row)
            records.append({})
        else:
            records.append({str(k): ("" if v is None else str(v)) for k, v in obj.items()
                            if not isinstance(v, (dict, list))})
    df = _frame(records)
    df.attrs["bad_rows"] = {r: "bad_json" for r in bad}
    return df


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


def _json_or_none(line):
    """The parsed line, or None when it is not JSON Python can hold (also integers
    past the 4300-digit conversion limit and nesting past the recursion limit)."""
    try:
        return json.loads(line)
    except (ValueError, RecursionError):
        return None


def _frame(records):
    """One row per record, even when every record is empty (unreadable lines)."""
    if not records:
        return pd.DataFrame()
    return pd.DataFrame(records, index=pd.RangeIndex(len(records))).fillna("")


def _decode_message(path, encoding):
    """One-line message naming the first line of ``path`` that is not ``encoding`` text."""
    where = ""
    try:
        with open(path, "rb") as fh:
            for lineno, raw in enumerate(fh, 1):
                try:
                    raw.decode(encoding)
                except UnicodeDecodeError as exc:
                    where = f" (line {lineno}, byte {exc.start + 1} of that line)"
                    break
    except (OSError, LookupError):  # pragma: no cover - the first read already worked
        pass
    return (f"{path}: not valid {encoding} text{where}; re-save the file as UTF-8 or pass "
            f"--encoding (e.g. latin-1).")


def _xapi_text(value):
    """Readable text of an xAPI language map or identifier."""
    if isinstance(value, dict):
        for key in ("en-US", "en", "und"):
            if value.get(key):
                return str(value[key])
        for v in value.values():
            if v:
                return str(v)
        return ""
    return "" if value is None else str(value)


def _last_segment(iri):
    iri = str(iri or "").rstrip("/")
    for sep in ("/", "#", ":"):
        if sep in iri:
            iri = iri.rsplit(sep, 1)[1]
    return iri


def _xapi_actor(actor):
    if not isinstance(actor, dict):
        return ""
    acc = actor.get("account")
    if isinstance(acc, dict) and acc.get("name"):
        return str(acc["name"])
    for key in ("mbox", "mbox_sha1sum", "openid", "name"):
        if actor.get(key):
            v = str(actor[key])
            return v[len("mailto:"):] if v.startswith("mailto:") else v
    return ""


def _read_xapi(path, encoding):
    text = "".join(_iter_lines(path, encoding))
    try:
        doc = json.loads(text)
        statements = doc.get("statements", []) if isinstance(doc, dict) else doc
        if isinstance(doc, dict) and "statements" not in doc:
            statements = [doc]
    except (ValueError, RecursionError):  # not one JSON document: try one per line
        statements = [_json_or_none(line) for line in text.splitlines() if line.strip()]
    if not isinstance(statements, list):
        raise DataFileError(f"{path}: expected a JSON array of xAPI statements.")
    records, bad = [], {}
    for i, st in enumerate(statements, start=1):
        if not isinstance(st, dict):
            bad[i] = "bad_json"
            records.append({})
            continue
        verb = st.get("verb") if isinstance(st.get("verb"), dict) else {}
        obj = st.get("object") if isinstance(st.get("object"), dict) else {}
        ctx = st.get("context") if isinstance(st.get("context"), dict) else {}
        definition = obj.get("definition") if isinstance(obj.get("definition"), dict) else {}
        action = _xapi_text(verb.get("display")) or _last_segment(verb.get("id"))
        target = _xapi_text(definition.get("name")) or _last_segment(obj.get("id"))
        rec = {
            "learner": _xapi_actor(st.get("actor")),
            "action": action,
            "time": str(st.get("timestamp") or ""),
            "target": target,
            "session": str(ctx.get("registration") or ""),
            "channel": "",
        }
        if not (rec["learner"] and rec["action"] and rec["time"]):
            bad[i] = "bad_statement"
        records.append(rec)
    df = _frame(records)
    df.attrs["bad_rows"] = bad
    return df


def _validate(raw, cols, path, duplicates, max_action_length):
    n = len(raw)
    if n == 0:
        raise DataFileError(f"{path}: no data rows below the header; export the event log again.")
    bad_rows = dict(raw.attrs.get("bad_rows", {}))
    present = list(raw.columns)
    if bad_rows and len(bad_rows) == n:
        raise DataFileError(
            f"{path}: none of the {n} records could be read "
            f"({sorted(set(bad_rows.values()))[0]}); check the file format.")
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
    seconds, reason, kind = parse_times(col("time"), source=cols["time"])
    detail = np.full(n, "", dtype=object)
    # one reason per row: unreadable records first, then the time problems found by
    # parse_times, then the learner/action checks below in their listed order
    for r, code in bad_rows.items():
        reason[r - 1] = code
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
    bad = ~ok
    detail[reason == "mixed_time_format"] = (
        f"the column is mostly {'ISO 8601' if kind == 'iso' else 'numeric seconds'}")
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
            f"{REJECT_REASONS.get(top, top)}); check the column options and the time format.")
    return LoadResult(events=events, rejects=rejects, n_input=n, path=os.fspath(path),
                      time_kind=kind, n_out_of_order=n_ooo)


def _count_out_of_order(events):
    if len(events) < 2:
        return 0
    # running maximum of the earlier rows of the same learner, in file order
    by = events["learner"]
    running = events.groupby(by, sort=False)["time"].cummax()
    previous = running.groupby(by, sort=False).shift(1)
    return int((events["time"] < previous).sum())
