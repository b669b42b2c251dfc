"""ISO 8601 date-times read the same way on every supported Python version.

Python 3.11 widened :meth:`datetime.fromisoformat` (a trailing ``Z``, any number of
fractional digits, offsets without a colon); Python 3.10 accepts only what
``isoformat()`` writes. The loader and the live watcher must agree on every Python
version, so the common forms are normalised here before ``fromisoformat`` sees them.
"""

from __future__ import annotations

import re
from datetime import datetime, timedelta, timezone

__all__ = ["parse_iso_datetime", "iso_seconds"]

_ISO = re.compile(
    r"(?P<date>\d{4}-\d{2}-\d{2})"
    r"(?:[T ](?P<time>\d{2}:\d{2}(?::\d{2})?)(?:[.,](?P<frac>\d+))?)?"
    r"\s*(?P<zone>[Zz]|[+-]\d{2}(?::?\d{2})?)?")

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)


def parse_iso_datetime(text):
    """A :class:`datetime` for an ISO 8601 string (naive when it names no zone).

    Raises :class:`ValueError` when ``text`` is not ISO 8601.

    Examples
    --------
    >>> parse_iso_datetime("2026-03-02T09:15:30.5Z")
    datetime.datetime(2026, 3, 2, 9, 15, 30, 500000, tzinfo=datetime.timezone.utc)
    >>> parse_iso_datetime("2026-03-02 09:15+0100").utcoffset()
    datetime.timedelta(seconds=3600)
    >>> parse_iso_datetime("2026-03-02")
    datetime.datetime(2026, 3, 2, 0, 0)
    """
    s = str(text).strip()
    m = _ISO.fullmatch(s)
    if m is None:
        return datetime.fromisoformat(s)  # other ISO forms (Python 3.11+), else ValueError
    stamp = datetime.fromisoformat(m["date"] + ("T" + m["time"] if m["time"] else ""))
    if m["frac"]:
        stamp = stamp.replace(microsecond=int(m["frac"][:6].ljust(6, "0")))
    zone = m["zone"]
    if zone:
        if zone in ("Z", "z"):
            tz = timezone.utc
        else:
            sign = -1 if zone[0] == "-" else 1
            digits = zone[1:].replace(":", "")
            minutes = int(digits[:2]) * 60 + (int(digits[2:4]) if len(digits) > 2 else 0)
            if minutes >= 24 * 60:
                raise ValueError(f"UTC offset out of range in {text!r}")
            tz = timezone(sign * timedelta(minutes=minutes))
        stamp = stamp.replace(tzinfo=tz)
    return stamp


def iso_seconds(text):
    """Seconds since 1970-01-01 UTC for an ISO 8601 string (no zone = UTC).

    Examples
    --------
    >>> iso_seconds("1970-01-02T00:00:00Z")
    86400.0
    >>> iso_seconds("1970-01-01T01:00:00+01:00")
    0.0
    """
    stamp = parse_iso_datetime(text)
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=timezone.utc)
    return (stamp - _EPOCH).total_seconds()
