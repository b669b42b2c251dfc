"""Warnings as data: what a run assumed or could not tell, kept for summary.json.

Library functions raise ordinary Python warnings (:class:`~seqmine.errors.SeqmineWarning`
with a ``code`` and an optional ``count``), so notebook users see them as usual. The
pipeline wraps its stages in :func:`collect_warnings`, which records each distinct
warning once in a :class:`WarningLog`; ``summary.json`` lists them under ``warnings`` and
the command line prints each once at the end of the run.
"""

from __future__ import annotations

import contextlib
import warnings
from dataclasses import asdict, dataclass

from ..errors import SeqmineWarning

__all__ = ["RunWarning", "WarningLog", "collect_warnings"]


@dataclass(frozen=True)
class RunWarning:
    """One recorded warning: a stable ``code``, the ``message`` and an optional ``count``."""

    code: str
    message: str
    count: int | None = None

    def as_dict(self):
        """``{"code", "message", "count"}`` (``count`` left out when it does not apply)."""
        d = asdict(self)
        if d["count"] is None:
            del d["count"]
        return d


class WarningLog:
    """Distinct warnings in the order they were first raised.

    Examples
    --------
    >>> log = WarningLog()
    >>> log.add("tied_times", "40% of consecutive events share a time stamp.", count=12)
    >>> log.add("tied_times", "40% of consecutive events share a time stamp.", count=12)
    >>> [w.code for w in log]
    ['tied_times']
    >>> log.as_list()
    [{'code': 'tied_times', 'message': '40% of consecutive events share a time stamp.', 'count': 12}]
    """

    def __init__(self):
        self._items = {}

    def add(self, code, message, count=None):
        """Record a warning once (the same code and message again is ignored)."""
        key = (str(code), str(message))
        if key not in self._items:
            self._items[key] = RunWarning(str(code), " ".join(str(message).split()),
                                          None if count is None else int(count))

    def extend(self, other):
        """Add every warning of another log (or any iterable of :class:`RunWarning`)."""
        for w in other:
            self.add(w.code, w.message, w.count)

    def codes(self):
        """The codes recorded, in order."""
        return [w.code for w in self]

    def as_list(self):
        """JSON-ready list of ``{"code", "message", "count"}`` objects."""
        return [w.as_dict() for w in self]

    def __iter__(self):
        return iter(list(self._items.values()))

    def __len__(self):
        return len(self._items)

    def __contains__(self, code):
        return any(w.code == code for w in self)


@contextlib.contextmanager
def collect_warnings(log=None):
    """Record every :class:`SeqmineWarning` raised inside the block into ``log``.

    Other warnings are passed on unchanged when the block ends (so a test suite that
    turns unexpected warnings into errors still sees them).

    Examples
    --------
    >>> import warnings
    >>> with collect_warnings() as log:
    ...     warnings.warn(SeqmineWarning("Only 3 learners.", code="small_sample", count=3))
    >>> log.as_list()
    [{'code': 'small_sample', 'message': 'Only 3 learners.', 'count': 3}]
    """
    log = WarningLog() if log is None else log
    with warnings.catch_warnings():
        shown = warnings.showwarning

        def record(message, category, filename, lineno, file=None, line=None):
            if isinstance(message, SeqmineWarning):
                log.add(message.code, str(message), message.count)
            else:  # not ours: shown as if nothing had caught it
                shown(message, category, filename, lineno, file, line)

        warnings.simplefilter("always", SeqmineWarning)
        warnings.showwarning = record
        yield log
