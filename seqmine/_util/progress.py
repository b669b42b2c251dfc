"""Progress bars (tqdm) that a single switch silences for scripts and tests."""

from __future__ import annotations

import os
import threading

from tqdm.auto import tqdm

__all__ = ["progress", "set_quiet", "is_quiet", "use_thread_lock"]

_QUIET = [os.environ.get("SEQMINE_QUIET", "") not in ("", "0")]


def set_quiet(quiet=True):
    """Silence (or restore) every progress bar and status message."""
    _QUIET[0] = bool(quiet)


def is_quiet():
    """True when progress output is switched off."""
    return _QUIET[0]


def use_thread_lock():
    """Make progress bars in this process lock with a thread lock only.

    tqdm otherwise creates a multiprocessing semaphore in every process that shows a
    bar; a worker process stopped while the run is interrupted cannot release it, and
    the interpreter then warns about leaked semaphores. Called in worker processes,
    whose bars never share a terminal line with another process's.
    """
    if "_lock" not in vars(tqdm):
        tqdm.set_lock(threading.RLock())


def progress(iterable=None, *, desc=None, total=None, unit="it", leave=False):
    """Wrap ``iterable`` in a tqdm bar unless quiet mode is on.

    Bars go to stderr so that machine-readable stdout (``seqmine watch``) stays clean.
    """
    return tqdm(iterable, desc=desc, total=total, unit=unit, leave=leave,
                disable=is_quiet(), dynamic_ncols=True, mininterval=0.5)
