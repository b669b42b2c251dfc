"""seqmine: ordered behaviour patterns in learners' interaction logs.

Load event logs and outcomes, encode them as symbol sequences with pause tokens,
mine frequent ordered patterns, score the ones that separate outcome groups, model
phases of work with hidden Markov models, measure early prediction, and export
validated patterns as detectors for a live event stream.

The public names below are imported on first use, so ``import seqmine`` stays quick
for the command line and for the live watcher.
"""

import importlib

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

#: public name -> module that defines it (pipeline order)
_LAZY = {
    # load and outcomes
    "load_events": "load", "LoadResult": "load", "parse_times": "load",
    "load_outcomes": "outcomes", "normalized_gain": "outcomes", "Grouping": "outcomes",
    # encode
    "Encoder": "encode", "encode": "encode", "load_mapping": "encode",
    "SequenceDB": "sequences", "PatternSet": "patterns",
    # mine
    "mine": "mine", "match": "mine", "save_patternset": "mine", "load_patternset": "mine",
    "mine_parallel": "_mine_parallel",
    # contrast
    "contrast": "contrast", "pairwise_contrast": "contrast", "sequence_rates": "contrast",
    "transitions": "transitions", "adjusted_residuals": "transitions", "yules_q": "transitions",
    "adjust_pvalues": "multitest", "westfall_young_minp": "multitest",
    # phases
    "fit_phases": "phases", "PhaseResult": "phases", "PhaseModel": "phases",
    "load_phase_models": "phases", "GroupHMMClassifier": "phases",
    # validate
    "validate": "validate", "ValidationResult": "validate", "learner_splits": "validate",
    "make_classifier": "validate", "PatternFeaturizer": "features",
    "FrequencyPauseFeaturizer": "features", "HMMLikelihoodFeaturizer": "features",
    # detect and watch
    "export_detectors": "detect", "select_detectors": "detect", "build_detectors": "detect",
    "save_detectors": "detect", "load_detectors": "detect", "validate_detectors": "detect",
    "Watcher": "watch", "Firing": "watch", "EventError": "watch",
    # report, pipeline, data, privacy, configuration
    "render_report": "report", "analyze": "pipeline", "load_config": "config",
    "generate_greenhouse": "demo_data", "write_greenhouse": "demo_data",
    "planted_patterns": "demo_data", "pseudonymize": "privacy",
}

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
    *_LAZY,
]


def __getattr__(name):
    if name in _LAZY:
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'seqmine' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
