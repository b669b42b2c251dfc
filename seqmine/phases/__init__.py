"""Phases of work: hidden Markov models per outcome group and comparison of their paths.

Public API
----------
- :func:`fit_phases` -> :class:`PhaseResult` (the whole stage; ``.save(folder)``)
- :class:`PhaseModel` (one categorical HMM: score, decode, sample, JSON, GraphML)
- :func:`fit_phase_model`, :func:`select_n_states` (Baum--Welch with restarts; BIC and
  held-out log-likelihood per state count)
- :func:`compare_state_paths`, :func:`align_states`, :func:`compare_transitions`,
  :func:`model_distance`, :func:`state_paths_db`
- :class:`GroupHMMClassifier` (log-likelihood-ratio classifier, scikit-learn contract)
- :func:`plot_phase_model` (state diagram with matplotlib, for the report)
"""

from .classify import GroupHMMClassifier
from .compare import (
                      align_states,
                      compare_state_paths,
                      compare_transitions,
                      model_distance,
                      path_measures,
                      state_paths_db,
)
from .fitting import fit_phase_model, parse_state_range, select_n_states
from .model import PhaseModel, name_state
from .plot import plot_phase_model
from .run import PhaseResult, fit_phases, load_phase_models

__all__ = [
    "fit_phases",
    "PhaseResult",
    "load_phase_models",
    "PhaseModel",
    "name_state",
    "fit_phase_model",
    "select_n_states",
    "parse_state_range",
    "compare_state_paths",
    "path_measures",
    "align_states",
    "compare_transitions",
    "model_distance",
    "state_paths_db",
    "GroupHMMClassifier",
    "plot_phase_model",
]
