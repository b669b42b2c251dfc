"""Sub-commands of the ``seqmine`` command line, one module each.

Each module defines ``NAME`` (the sub-command), ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``. The command line discovers the
modules in this package, so adding a stage needs no edit elsewhere. Commands are thin:
they parse options, call the Python API and write files.
"""
