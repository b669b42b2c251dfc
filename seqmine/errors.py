"""Exception hierarchy of seqmine.

User errors (bad files, bad options) derive from :class:`SeqmineInputError`, which
is also a :class:`ValueError`, so callers can catch either. The command line turns
them into a one-line message and exit status 2; anything else is an internal error
(exit status 1).
"""

import argparse

__all__ = [
    "SeqmineError",
    "SeqmineInputError",
    "DataFileError",
    "ColumnError",
    "ParameterError",
    "OutputError",
    "OptionValueError",
    "PatternExplosionError",
    "NotFittedError",
    "SeqmineWarning",
]


class SeqmineError(Exception):
    """Base class of every error raised on purpose by seqmine."""


class SeqmineInputError(SeqmineError, ValueError):
    """A user error: bad input file, bad option, impossible request.

    The message is one line that names the file, row, column or option and says
    how to fix it.
    """


class DataFileError(SeqmineInputError):
    """An input file is missing, empty, unreadable or malformed."""


class ColumnError(SeqmineInputError):
    """A required column is missing from an input table."""


class ParameterError(SeqmineInputError):
    """An option or parameter has an invalid value."""


class OutputError(SeqmineInputError):
    """An output cannot be written: a link or an input where an output goes, a file where
    a folder is needed, no permission, a full disk, or another run writing the same folder.
    Nothing of the run is left behind when it is raised."""


class OptionValueError(ParameterError, argparse.ArgumentTypeError):
    """A command-line option value that cannot be read (e.g. ``--max-gap x``).

    Raised by the value parsers of the command line; argparse reports it as one line
    naming the option.
    """


class PatternExplosionError(SeqmineInputError):
    """Mining would produce more patterns than the configured limit."""


class NotFittedError(SeqmineError, ValueError, AttributeError):
    """An estimator was used before ``fit``."""


class SeqmineWarning(UserWarning):
    """Something the user should know about but that does not stop the run.

    Parameters
    ----------
    message : str
        One or two sentences: what was noticed or assumed, and what to do about it.
    code : str
        A stable machine-readable name (``coarse_times``, ``heavy_learner`` ...), listed
        with the message in ``summary.json`` under ``warnings``.
    count : int, optional
        How many rows, learners, patterns ... the warning concerns, where that applies.

    Examples
    --------
    >>> w = SeqmineWarning("3 learners have no events.", code="learners_without_events", count=3)
    >>> (w.code, w.count, str(w))
    ('learners_without_events', 3, '3 learners have no events.')
    """

    def __init__(self, message="", code="general", count=None):
        super().__init__(message)
        self.code = str(code)
        self.count = None if count is None else int(count)
