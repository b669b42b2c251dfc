"""seqmine: ordered behaviour patterns in learners' interaction logs.

Load event logs and outcomes, encode them as symbol sequences with pause tokens,
mine frequent ordered patterns, score the ones that separate outcome groups, model
phases of work with hidden Markov models, measure early prediction, and export
validated patterns as detectors for a live event stream.
"""

from ._version import __version__
from .errors import (
    ColumnError,
    DataFileError,
    NotFittedError,
    ParameterError,
    PatternExplosionError,
    SeqmineError,
    SeqmineInputError,
    SeqmineWarning,
)
from .patterns import PatternSet
from .sequences import SequenceDB

__all__ = [
    "__version__",
    "SeqmineError",
    "SeqmineInputError",
    "DataFileError",
    "ColumnError",
    "ParameterError",
    "PatternExplosionError",
    "NotFittedError",
    "SeqmineWarning",
    "SequenceDB",
    "PatternSet",
]
