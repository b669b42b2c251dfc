"""The ``seqmine`` command line: a thin layer over the Python API.

Exit status: 0 success; 2 user error (one-line message naming the file, row,
column or option and the fix; no traceback); 1 internal error. ``--debug`` shows
tracebacks.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
import warnings

from .._util.progress import quiet_mode
from .._version import __version__
from ..errors import SeqmineError, SeqmineInputError
from . import commands

__all__ = ["main", "build_parser"]

# Order in which sub-commands are listed in --help (pipeline order); others follow.
_ORDER = ["demo", "analyze", "encode", "mine", "contrast", "phases", "validate",
          "detectors", "watch", "report"]


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


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"seqmine: warning: {_one_line(message)}", file=sys.stderr)


def _one_line(msg):
    return " ".join(str(msg).split())


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
    try:
        # quiet mode for this invocation only (a context setting, restored on return)
        with quiet_mode(bool(getattr(args, "quiet", False))), warnings.catch_warnings():
            # every warning is shown, as one line, whatever ran before in this process
            warnings.simplefilter("always")
            if not debug:
                warnings.showwarning = _show_warning
            return int(args._run(args) or 0)
    except SeqmineInputError as exc:
        if debug:
            raise
        print(f"seqmine: error: {_one_line(exc)}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # the reader went away (e.g. 'seqmine watch ... | head'): stop quietly
        import os
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("seqmine: interrupted", file=sys.stderr)
        return 130
    except SeqmineError as exc:
        if debug:
            raise
        print(f"seqmine: error: {_one_line(exc)}", file=sys.stderr)
        return 1
    except Exception as exc:  # internal error: say so, point to --debug
        if debug:
            raise
        print(f"seqmine: internal error: {type(exc).__name__}: {_one_line(exc)} "
              f"(re-run with --debug for the traceback and report it)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
