"""Inputs that are not regular files: standard input (``-``), named pipes, process
substitution (``<(zcat log.csv.gz)``) and other character devices.

The loaders read a file more than once (the header, then the table; the size before
anything), which a pipe cannot give. :func:`regular_input` therefore copies such an
input once into a private temporary file (stopping at the size limit) and hands that
file on; messages name the input as the user gave it.
"""

from __future__ import annotations

import contextlib
import os
import stat
import sys
import tempfile
from pathlib import Path

from ..errors import DataFileError, SeqmineInputError

__all__ = ["regular_input", "is_stream", "STDIN", "STDIN_NAME"]

#: The name that stands for standard input.
STDIN = "-"
#: How standard input is named in messages.
STDIN_NAME = "standard input"


def is_stream(path):
    """True for ``-`` and for paths naming a pipe, socket or character device.

    Examples
    --------
    >>> is_stream("-"), is_stream(__file__)
    (True, False)
    """
    if str(path) == STDIN:
        return True
    try:
        mode = os.stat(path).st_mode
    except (OSError, ValueError):
        return False
    return stat.S_ISFIFO(mode) or stat.S_ISCHR(mode) or stat.S_ISSOCK(mode)


@contextlib.contextmanager
def regular_input(path, role="input", *, max_bytes=None):
    """Yield ``(regular file path, name to show)`` for ``path``.

    A regular file (or a missing path, which the loader reports) is passed through;
    standard input and pipes are copied into a temporary file that is removed when
    the block ends. A :class:`~seqmine.errors.SeqmineInputError` raised inside the
    block that names the temporary file is raised again naming the input.

    Parameters
    ----------
    path : str or path-like
        ``-`` for standard input.
    role : str
        What the input is (``events``, ``outcomes``), for messages and the file name.
    max_bytes : int, optional
        Stop with a message when the stream is longer than this.
    """
    if not is_stream(path):
        yield Path(path), str(path)
        return
    shown = STDIN_NAME if str(path) == STDIN else str(path)
    suffix = "" if str(path) == STDIN else Path(str(path)).suffix
    with tempfile.TemporaryDirectory(prefix="seqmine-input-") as tmp:
        spool = Path(tmp) / f"{role}{suffix}"
        _copy(path, spool, shown, role, max_bytes)
        try:
            yield spool, shown
        except SeqmineInputError as exc:
            text = str(exc)
            if str(spool) not in text:
                raise
            raise type(exc)(text.replace(str(spool), shown)) from None


def _copy(path, spool, shown, role, max_bytes):
    limit = None if max_bytes is None else int(max_bytes)
    try:
        source = sys.stdin.buffer if str(path) == STDIN else open(path, "rb")  # noqa: SIM115
    except OSError as exc:
        raise DataFileError(f"{shown}: cannot be read ({exc.strerror}); check the path.") \
            from None
    copied = 0
    try:
        with open(spool, "wb") as out:
            while True:
                block = source.read(1 << 20)
                if not block:
                    break
                copied += len(block)
                if limit is not None and copied > limit:
                    raise DataFileError(
                        f"{shown}: the {role} stream is longer than the {limit:,}-byte "
                        f"limit; raise it with --max-bytes or split the log.")
                out.write(block)
    except OSError as exc:
        raise DataFileError(f"{shown}: the {role} could not be copied to a temporary file "
                            f"({exc.strerror}); save it to a file and give its path.") from None
    finally:
        if source is not sys.stdin.buffer:
            source.close()
    if copied == 0:
        raise DataFileError(f"{shown}: nothing was read (the {role} stream is empty); check "
                            f"the command that writes it.")
