"""Progress output: bars on a terminal, plain stage lines otherwise, nothing when quiet.

Quiet mode is a context setting (like :func:`numpy.errstate`), not process-wide state:
``with quiet_mode():`` silences bars and stage lines inside the block and restores the
previous setting when the block ends. ``SEQMINE_QUIET=1`` in the environment makes quiet
the default (benchmarks and worker processes use it).

tqdm is imported only when a bar is actually drawn, so importing this module (and the
command line) stays quick.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import sys
import threading

__all__ = ["progress", "quiet_mode", "is_quiet", "stage_line", "use_thread_lock"]

_QUIET = contextvars.ContextVar("seqmine_quiet",
                                default=os.environ.get("SEQMINE_QUIET", "") not in ("", "0"))


@contextlib.contextmanager
def quiet_mode(quiet=True):
    """Silence (``quiet=True``) or allow progress output inside the ``with`` block.

    Examples
    --------
    >>> with quiet_mode():
    ...     is_quiet()
    True
    >>> with quiet_mode(True), quiet_mode(False):
    ...     is_quiet()
    False
    """
    token = _QUIET.set(bool(quiet))
    try:
        yield
    finally:
        _QUIET.reset(token)


def is_quiet():
    """True when progress output is switched off in the current context."""
    return _QUIET.get()


def _on_terminal(stream=None):
    stream = sys.stderr if stream is None else stream
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # closed or replaced stream
        return False


class _NoBar:
    """Stands in for a tqdm bar when none is drawn (quiet, or not a terminal)."""

    def __init__(self, iterable=None):
        self._iterable = iterable

    def __iter__(self):
        return iter(self._iterable if self._iterable is not None else ())

    def update(self, n=1):
        pass

    def set_postfix_str(self, *args, **kwargs):
        pass

    def set_postfix(self, *args, **kwargs):
        pass

    def set_description(self, *args, **kwargs):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def progress(iterable=None, *, desc=None, total=None, unit="it", leave=False):
    """Wrap ``iterable`` in a progress bar on a terminal; otherwise return it unchanged.

    Bars go to standard error so that machine-readable standard output (``seqmine
    watch``) stays clean, and only when standard error is a terminal, so log files get
    the plain stage lines of :func:`stage_line` instead of escape codes.

    Examples
    --------
    >>> with quiet_mode():
    ...     list(progress(range(3), desc="demo"))
    [0, 1, 2]
    """
    if is_quiet() or not _on_terminal():
        return _NoBar(iterable)
    from tqdm.auto import tqdm
    return tqdm(iterable, desc=desc, total=total, unit=unit, leave=leave,
                dynamic_ncols=True, mininterval=0.5)


def use_thread_lock():
    """Make progress bars in this process lock with a thread lock only.

    tqdm otherwise creates a multiprocessing semaphore in every process that draws a
    bar; a worker process stopped while the run is interrupted cannot release it, and
    the interpreter then warns about leaked semaphores. Called in worker processes,
    whose bars never share a terminal line with another process's.
    """
    if "tqdm" not in sys.modules and "tqdm.auto" not in sys.modules and not _on_terminal():
        return  # no bar will be drawn here
    from tqdm.auto import tqdm
    if "_lock" not in vars(tqdm):
        tqdm.set_lock(threading.RLock())


def stage_line(text):
    """Print ``seqmine: TEXT`` on standard error unless quiet (one line per stage)."""
    if not is_quiet():
        print(f"seqmine: {text}", file=sys.stderr, flush=True)
