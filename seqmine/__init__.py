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
    "load_events": "inputs.load", "LoadResult": "inputs.load", "parse_times": "inputs.load",
    "load_outcomes": "inputs.outcomes", "normalized_gain": "inputs.outcomes", "Grouping": "inputs.outcomes",
    # encode
    "Encoder": "encoding.encoder", "encode": "encoding.encoder", "load_mapping": "encoding.encoder",
    "SequenceDB": "encoding.sequences", "PatternSet": "mining.patterns",
    # mine
    "mine": "mining.miner", "match": "mining.miner", "save_patternset": "mining.miner", "load_patternset": "mining.miner",
    "mine_parallel": "mining.partitions",
    # contrast
    "contrast": "scoring.contrast", "pairwise_contrast": "scoring.contrast", "sequence_rates": "scoring.contrast",
    "transitions": "scoring.transitions", "adjusted_residuals": "scoring.transitions", "yules_q": "scoring.transitions",
    "adjust_pvalues": "scoring.multitest", "westfall_young_minp": "scoring.multitest",
    # phases
    "fit_phases": "phases", "PhaseResult": "phases", "PhaseModel": "phases",
    "load_phase_models": "phases", "GroupHMMClassifier": "phases",
    # validate
    "validate": "validation.crossval", "ValidationResult": "validation.crossval", "learner_splits": "validation.crossval",
    "make_classifier": "validation.crossval", "PatternFeaturizer": "validation.features",
    "FrequencyPauseFeaturizer": "validation.features", "HMMLikelihoodFeaturizer": "validation.features",
    # detect and watch
    "export_detectors": "detection.detectors", "select_detectors": "detection.detectors", "build_detectors": "detection.detectors",
    "save_detectors": "detection.detectors", "load_detectors": "detection.detectors", "validate_detectors": "detection.detectors",
    "Watcher": "detection.watcher", "Firing": "detection.watcher", "EventError": "detection.watcher",
    # report, pipeline, data, privacy, configuration
    "render_report": "reporting.render", "analyze": "pipeline", "AnalysisResult": "pipeline",
    "load_config": "config",
    "generate_greenhouse": "demo_data", "write_greenhouse": "demo_data",
    "planted_patterns": "demo_data", "pseudonymize": "inputs.privacy",
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
