"""The ``seqmine`` command line: a thin layer over the Python API (see :mod:`.main`)."""

from .main import build_parser, main

__all__ = ["main", "build_parser"]
