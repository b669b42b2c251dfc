"""Shared parameter checks; every message has the same shape and names the fix."""

from __future__ import annotations

import difflib
import numbers

from ..errors import ColumnError, ParameterError

__all__ = [
    "check_fraction",
    "check_int",
    "check_jobs",
    "check_number",
    "check_choice",
    "check_columns",
]


def _owner(where):
    return f" of {where}" if where else ""


def check_fraction(value, name, where="", *, low_inclusive=False, high_inclusive=True):
    """Return ``value`` as float if it lies in (0, 1] (bounds configurable)."""
    lo = "[" if low_inclusive else "("
    hi = "]" if high_inclusive else ")"
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool)
    if ok:
        v = float(value)
        ok = (v >= 0 if low_inclusive else v > 0) and (v <= 1 if high_inclusive else v < 1)
    if not ok:
        raise ParameterError(
            f"The '{name}' parameter{_owner(where)} must be a float in {lo}0, 1{hi}. "
            f"Got {value!r} instead."
        )
    return float(value)


def check_int(value, name, where="", *, minimum=None, maximum=None, allow_none=False):
    """Return ``value`` as int if it is an integer within the bounds."""
    if value is None and allow_none:
        return None
    ok = isinstance(value, numbers.Integral) and not isinstance(value, bool)
    if ok and minimum is not None and value < minimum:
        ok = False
    if ok and maximum is not None and value > maximum:
        ok = False
    if not ok:
        bounds = []
        if minimum is not None:
            bounds.append(f">= {minimum}")
        if maximum is not None:
            bounds.append(f"<= {maximum}")
        extra = (" " + " and ".join(bounds)) if bounds else ""
        none = " or None" if allow_none else ""
        raise ParameterError(
            f"The '{name}' parameter{_owner(where)} must be an int{extra}{none}. "
            f"Got {value!r} instead."
        )
    return int(value)


def check_jobs(value, name="n_jobs", where=""):
    """Return ``value`` as int if it is a number of worker processes: >= 1, or -1 for all cores.

    Examples
    --------
    >>> check_jobs(-1), check_jobs(2)
    (-1, 2)
    >>> check_jobs(0, "n_jobs", "validate")
    Traceback (most recent call last):
    ...
    seqmine.errors.ParameterError: The 'n_jobs' parameter of validate must be a positive int or -1 (all cores). Got 0 instead.
    """
    ok = isinstance(value, numbers.Integral) and not isinstance(value, bool)
    if not ok or not (value >= 1 or value == -1):
        raise ParameterError(
            f"The '{name}' parameter{_owner(where)} must be a positive int or -1 (all cores). "
            f"Got {value!r} instead."
        )
    return int(value)


def check_number(value, name, where="", *, minimum=None, strict=False, allow_none=False):
    """Return ``value`` as float if it is a finite real number above ``minimum``."""
    if value is None and allow_none:
        return None
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool)
    if ok:
        v = float(value)
        ok = v == v and abs(v) != float("inf")
        if ok and minimum is not None:
            ok = v > minimum if strict else v >= minimum
    if not ok:
        rel = ">" if strict else ">="
        extra = f" {rel} {minimum}" if minimum is not None else ""
        raise ParameterError(
            f"The '{name}' parameter{_owner(where)} must be a finite number{extra}. "
            f"Got {value!r} instead."
        )
    return float(value)


def check_choice(value, name, choices, where=""):
    """Return ``value`` if it is one of ``choices``."""
    if value not in choices:
        opts = ", ".join(repr(c) for c in choices)
        raise ParameterError(
            f"The '{name}' parameter{_owner(where)} must be one of {opts}. Got {value!r} instead."
        )
    return value


def check_columns(columns, required, source, option_hint=None):
    """Raise :class:`ColumnError` naming the closest existing column names."""
    present = [str(c) for c in columns]
    for col in required:
        if col not in present:
            close = difflib.get_close_matches(col, present, n=3, cutoff=0.5)
            lower = [c for c in present if c.strip().lower() == col.lower()]
            hint = ""
            cand = lower or close
            if cand:
                hint = f" Did you mean {', '.join(repr(c) for c in cand)}?"
            opt = f" Name the column with {option_hint.format(col=col)}." if option_hint else ""
            raise ColumnError(
                f"{source}: required column '{col}' is missing (found: "
                f"{', '.join(present[:12]) or 'no columns'}).{hint}{opt}"
            )
