"""The ``seqmine`` command line: a thin layer over the Python API.

Exit status: 0 success; 2 user error (one-line message naming the file, row,
column or option and the fix; no traceback); 1 internal error. ``--debug`` shows
tracebacks.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import signal
import sys
import threading
import warnings

from .._util.progress import quiet_mode
from .._util.text import terminal_safe
from .._version import __version__
from ..errors import SeqmineError, SeqmineInputError
from . import commands

__all__ = ["main", "build_parser"]

# Order in which sub-commands are listed in --help (pipeline order); others follow.
_ORDER = ["demo", "analyze", "encode", "mine", "contrast", "phases", "validate",
          "detectors", "watch", "report", "keygen"]


def _command_modules():
    names = [m.name for m in pkgutil.iter_modules(commands.__path__) if not m.name.startswith("_")]
    mods = [importlib.import_module(f"{commands.__name__}.{n}") for n in names]
    rank = {n: i for i, n in enumerate(_ORDER)}
    return sorted(mods, key=lambda m: (rank.get(m.NAME, len(rank)), m.NAME))


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors: the option, what is wrong, where the help is."""

    def error(self, message):
        print(f"seqmine: error: {_one_line(message)} (see '{self.prog} --help')",
              file=sys.stderr)
        self.exit(2)


def build_parser():
    """The argument parser with every sub-command."""
    parser = _Parser(
        prog="seqmine",
        description=("Find ordered behaviour patterns that separate strong from weak "
                     "learners in interaction logs, and turn them into live detectors."),
        epilog="Run 'seqmine COMMAND --help' for the options of one command.",
    )
    parser.add_argument("--version", action="version", version=f"seqmine {__version__}")
    common = _Parser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    common.add_argument("-q", "--quiet", action="store_true",
                        help="no progress bars or messages (for scripts)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in _command_modules():
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP),
                           parents=[common])
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


class _StopSignals:
    """While a command runs, SIGINT (Ctrl-C) and SIGTERM interrupt it with
    KeyboardInterrupt, so the clean-up code runs: temporary folders are removed, worker
    pools shut down, the previous output stays. The signal is remembered, so that an
    interrupt a library turned into another error (pandas reports a read cut short by
    Ctrl-C as a parser error) is still reported as the interrupt it was. Outside the
    main thread nothing is changed."""

    _SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __init__(self):
        self.received = None
        self._before = {}

    def _handler(self, signum, frame):
        self.received = signum
        raise KeyboardInterrupt

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in self._SIGNALS:
                self._before[sig] = signal.signal(sig, self._handler)
        return self

    def __exit__(self, *exc):
        for sig, before in self._before.items():
            signal.signal(sig, before)
        return False

    def report(self):
        """The exit status and line of an interrupted run."""
        if self.received == signal.SIGTERM:
            print("seqmine: terminated (SIGTERM); nothing half-written was left behind",
                  file=sys.stderr)
            return 128 + signal.SIGTERM
        print("seqmine: interrupted; nothing half-written was left behind", file=sys.stderr)
        return 128 + signal.SIGINT


def _show_warning(message, category, filename, lineno, file=None, line=None):
    code = getattr(message, "code", None)  # a SeqmineWarning names itself, as in summary.json
    tag = f" [{code}]" if code and code != "general" else ""
    print(f"seqmine: warning{tag}: {_one_line(message)}", file=sys.stderr)


def _one_line(msg):
    return terminal_safe(" ".join(str(msg).split()))


def main(argv=None):
    """Entry point of the ``seqmine`` console script; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed a usage message
        return int(exc.code or 0) if exc.code in (0, None) else 2
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    debug = getattr(args, "debug", False)
    stop = _StopSignals()
    try:
        # quiet mode for this invocation only (a context setting, restored on return)
        with quiet_mode(bool(getattr(args, "quiet", False))), warnings.catch_warnings(), stop:
            # every warning is shown, as one line, whatever ran before in this process
            warnings.simplefilter("always")
            if not debug:
                warnings.showwarning = _show_warning
            return int(args._run(args) or 0)
    except KeyboardInterrupt:
        return stop.report()
    except BrokenPipeError:
        # the reader went away (e.g. 'seqmine watch ... | head'): stop quietly
        import os
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except Exception as exc:
        if stop.received is not None:  # an interrupt a library reported as another error
            return stop.report()
        if debug:
            raise
        return _report_error(exc)


def _report_error(exc):
    """One line on standard error for an error that ended a command; its exit status."""
    if isinstance(exc, SeqmineInputError):
        print(f"seqmine: error: {_one_line(exc)}", file=sys.stderr)
        return 2
    if isinstance(exc, OSError) and exc.filename:
        print(f"seqmine: error: {exc.filename}: {exc.strerror or type(exc).__name__}; check "
              f"the path and its permissions.", file=sys.stderr)
        return 2
    if isinstance(exc, SeqmineError):
        print(f"seqmine: error: {_one_line(exc)}", file=sys.stderr)
        return 1
    print(f"seqmine: internal error: {type(exc).__name__}: {_one_line(exc)} "
          f"(re-run with --debug for the traceback and report it)", file=sys.stderr)
    return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
