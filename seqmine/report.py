"""The self-contained HTML report, rendered from the files of an output folder.

:func:`render_report` reads the files the pipeline wrote (names and columns listed
in the module constants below, which are the reader's contract) and writes
``report.html`` beside them: one page, inline CSS, figures as inline SVG, no
scripts, no external fonts, images or links, and a Content-Security-Policy that
forbids scripts and network loads. Every string taken from the data (tokens,
actions, learner ids, group names, hint text, reasons) is HTML-escaped.

Each section is rendered when its file exists and shows a short "not produced in
this run" note otherwise; a missing column leaves out only what needs it. Output is
deterministic: the same files give a byte-identical page (no dates, fixed SVG ids).
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import pandas as pd

from . import _report_sections as sec
from ._report_sections import esc
from .errors import DataFileError
from ._version import __version__

__all__ = [
    "render_report",
    "REPORT_FILE",
    "OUTPUT_FILES",
    "SUMMARY_KEYS",
    "REJECT_COLUMNS",
    "PATTERN_COLUMNS",
    "TRANSITION_COLUMNS",
    "PHASE_MODEL_KEYS",
    "STATE_SELECTION_COLUMNS",
    "OCCUPANCY_COLUMNS",
    "PREDICTION_COLUMNS",
    "DETECTOR_KEYS",
    "EXAMPLE_KEYS",
]

#: Name of the page written into the output folder.
REPORT_FILE = "report.html"

#: Files of an output folder read by the report (relative paths).
OUTPUT_FILES = {
    "summary": "summary.json",
    "rejects": "rejects.csv",
    "patterns": "patterns.csv",
    "transitions": "transitions.csv",
    "phases": "phases",
    "state_selection": "phases/state_selection.csv",
    "occupancy": "phases/occupancy.csv",
    "early_prediction": "early_prediction.csv",
    "detectors": "detectors.json",
    "examples": "examples.json",
}

#: Keys of ``summary.json`` the report reads (all optional; dotted = nested).
SUMMARY_KEYS = {
    "seqmine_version": "version of seqmine that wrote the folder (else versions.seqmine)",
    "seed": "random seed of the run",
    "groups": "list of outcome group names in display order, e.g. ['strong', 'weak']",
    "counts.rows_in": "event rows read from the input file",
    "counts.rows_kept": "event rows used",
    "counts.rows_rejected": "event rows rejected (listed in rejects.csv)",
    "counts.learners": "learners with at least one kept event",
    "counts.learners_per_group": "{group: learners}",
    "counts.learners_without_group": "learners with events but no outcome group",
    "counts.sequences": "sequences (one per learner, or per session)",
    "counts.sequences_per_group": "{group: sequences}",
    "counts.patterns_mined": "patterns found by the miner",
    "counts.patterns_significant": "patterns whose q value is at or below alpha",
    "gain_by_group": "{group: {n, min, q1, median, q3, max}} or {group: [values]}",
    "sequence_lengths": "{group: {n, min, q1, median, q3, max}} or {group: [values]} (tokens)",
    "encoding.unit": "'learner' or 'session'",
    "encoding.pause.strategy": "how pause bins were chosen",
    "encoding.pause.edges": "bin edges in seconds, ascending",
    "encoding.pause.labels": "bin labels, one more than edges",
    "encoding.pause.implicit": "labels not written as tokens",
    "method.grouping": "how learners were split into groups (text)",
    "method.presence_test": "test on pattern presence (text), e.g. Fisher's exact test",
    "method.rate_test": "test on per-sequence rates (text), e.g. Mann-Whitney U",
    "method.correction": "'bh', 'holm' or 'westfall-young'",
    "method.alpha": "threshold on q values",
    "method.n_permutations": "permutations for Westfall-Young",
    "method.min_support": "minimum support in at least one group",
    "method.max_length": "longest pattern mined",
    "method.max_gap": "largest gap (tokens) between pattern items",
    "method.cv_folds": "learner-level cross-validation folds of early prediction",
    "pseudonymized": "true when learner identifiers were replaced by keyed hashes",
    "config": "effective configuration (shown verbatim)",
    "versions": "{package: version}",
}

#: Columns of ``rejects.csv``.
REJECT_COLUMNS = {"source_row": "row number in the input file", "reason": "why it was rejected"}

#: Columns of ``patterns.csv`` (``<group>`` = each group name).
PATTERN_COLUMNS = {
    "pattern": "tokens joined by ' > ' (required)",
    "length": "number of tokens",
    "support_<group>": "share of the group's sequences containing the pattern (0-1)",
    "p_value": "raw p value of the presence test",
    "q_value": "p value after the multiple-comparison correction",
    "favours": "group in which the pattern is more common when significant, else empty",
    "risk_difference": "support in the first group minus support in the second",
    "odds_ratio": "odds of presence, first group over second",
    "cohens_h": "Cohen's h between the two supports",
    "cliffs_delta": "Cliff's delta of per-sequence instance counts",
    "stability": "share of resamples in which the pattern was again significant (0-1)",
}

#: Columns of ``transitions.csv``.
TRANSITION_COLUMNS = {
    "group": "group name (or 'all')",
    "from": "token",
    "to": "next token",
    "count": "observed transitions",
    "expected": "expected count under independence",
    "adjusted_residual": "adjusted residual (z-like; |value| > 1.96 is notable)",
    "yules_q": "Yule's Q of the 2x2 table of the transition (-1..1)",
}

#: Keys of each phase model ``phases/*.json`` (a JSON object with ``states``).
PHASE_MODEL_KEYS = {
    "group": "group the model was fitted on, or 'pooled'",
    "n_states": "number of states",
    "states": "list of {name, emissions: [[token, prob], ...] most likely first, dwell}",
    "states[].dwell": "expected consecutive steps in the state, 1 / (1 - a_ii)",
    "transmat": "transition matrix, list of rows (row = from state)",
    "startprob": "initial state probabilities",
}

#: Columns of ``phases/state_selection.csv``.
STATE_SELECTION_COLUMNS = {
    "group": "group or 'pooled'",
    "n_states": "number of states tried",
    "bic": "Bayesian information criterion (lower is better)",
    "heldout_loglik": "held-out log-likelihood per token (higher is better)",
    "chosen": "true for the state count kept",
}

#: Columns of ``phases/occupancy.csv`` (tidy form; a wide form with
#: ``occupancy_<group>`` columns is accepted too).
OCCUPANCY_COLUMNS = {
    "state": "state name (as in the pooled model)",
    "group": "group",
    "occupancy": "share of the group's time steps decoded into the state (0-1)",
    "p_value": "optional test of the difference between groups",
    "q_value": "optional corrected p value",
}

#: Columns of ``early_prediction.csv``.
PREDICTION_COLUMNS = {
    "classifier": "name of the classifier",
    "fraction": "share of each sequence observed (0-1]",
    "accuracy": "accuracy over held-out learners",
    "balanced_accuracy": "mean of per-group recalls",
    "recall_<group>": "share of the group's learners recognised",
    "roc_auc": "area under the ROC curve",
    "accuracy_ci_low": "lower confidence bound of accuracy",
    "accuracy_ci_high": "upper confidence bound of accuracy",
    "balanced_accuracy_ci_low": "lower confidence bound of balanced accuracy",
    "balanced_accuracy_ci_high": "upper confidence bound of balanced accuracy",
    "baseline": "accuracy of always predicting the majority group",
}

#: Keys of ``detectors.json``: ``{"detectors": [...]}``, each detector an object.
DETECTOR_KEYS = {
    "id": "identifier of the detector",
    "pattern": "list of tokens (or a string joined by ' > ')",
    "direction": "'encourage' or 'discourage'",
    "hint": "hint text shown to learners when it fires (user-editable)",
    "priority": "number; higher first",
    "evidence": "object of evidence values (e.g. q_value, support_<group>, stability)",
}

#: Keys of ``examples.json``: ``{"patterns": {pattern: [excerpt, ...]}}``.
EXAMPLE_KEYS = {
    "patterns": "pattern (as in patterns.csv) -> list of excerpts",
    "excerpt.learner": "learner id (pseudonymised when the run was)",
    "excerpt.group": "group of the learner (optional)",
    "excerpt.events": "list of {time (s), token (or action), pause (s to next, optional), matched (bool)}",
}

_DEFAULT_ALPHA = 0.05


def render_report(out_dir, *, examples=True, max_patterns=12, max_examples=2):
    """Write ``report.html`` into an output folder, from the files in it.

    Parameters
    ----------
    out_dir : str or path-like
        Output folder of ``seqmine analyze`` (see :data:`OUTPUT_FILES`).
    examples : bool, default True
        Show example excerpts from ``examples.json`` (switch off to keep log
        excerpts out of the report).
    max_patterns : int, default 12
        Differential patterns shown in detail.
    max_examples : int, default 2
        Excerpts shown per pattern.

    Returns
    -------
    pathlib.Path
        Path of the written ``report.html``.

    Raises
    ------
    DataFileError
        If ``out_dir`` is not a folder or holds none of the known output files.

    Examples
    --------
    >>> import json, tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "summary.json").write_text(json.dumps({"groups": ["strong", "weak"]}))
    >>> render_report(d).name
    'report.html'
    """
    folder = Path(out_dir)
    if not folder.is_dir():
        raise DataFileError(
            f"Output folder {str(folder)!r} does not exist or is not a folder; "
            f"give the folder written by 'seqmine analyze --out'.")
    known = [n for n in OUTPUT_FILES.values() if (folder / n).exists()]
    if not known:
        raise DataFileError(
            f"Output folder {str(folder)!r} holds none of the files the report reads "
            f"({', '.join(sorted(set(OUTPUT_FILES.values()) - {'phases'}))}); run "
            f"'seqmine analyze' into it first.")
    data = _read_all(folder)
    page = _page(data, examples=examples, max_patterns=max_patterns, max_examples=max_examples)
    target = folder / REPORT_FILE
    tmp = folder / (REPORT_FILE + ".tmp")
    with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(page)
    os.replace(tmp, target)
    return target


# --------------------------------------------------------------------------- reading


class _Input:
    """One input of the report: its value, or a note why it is missing."""

    def __init__(self, name, value=None, note=None):
        self.name, self.value, self.note = name, value, note

    @property
    def ok(self):
        return self.value is not None


def _read_all(folder):
    d = {}
    d["summary"] = _read_json(folder, OUTPUT_FILES["summary"], dict)
    d["rejects"] = _read_csv(folder, OUTPUT_FILES["rejects"], numeric=("source_row",))
    d["patterns"] = _read_csv(
        folder, OUTPUT_FILES["patterns"],
        numeric=("length", "p_value", "q_value", "risk_difference", "odds_ratio", "cohens_h",
                 "cliffs_delta", "stability"), numeric_prefix=("support_",))
    d["transitions"] = _read_csv(folder, OUTPUT_FILES["transitions"],
                                 numeric=("count", "expected", "adjusted_residual", "yules_q"))
    d["state_selection"] = _read_csv(folder, OUTPUT_FILES["state_selection"],
                                     numeric=("n_states", "bic", "heldout_loglik"))
    d["occupancy"] = _read_csv(folder, OUTPUT_FILES["occupancy"],
                               numeric=("occupancy", "p_value", "q_value"),
                               numeric_prefix=("occupancy_",))
    d["early_prediction"] = _read_csv(
        folder, OUTPUT_FILES["early_prediction"],
        numeric=("fraction", "accuracy", "balanced_accuracy", "roc_auc", "baseline",
                 "accuracy_ci_low", "accuracy_ci_high", "balanced_accuracy_ci_low",
                 "balanced_accuracy_ci_high"), numeric_prefix=("recall_",))
    d["detectors"] = _read_json(folder, OUTPUT_FILES["detectors"], dict)
    d["examples"] = _read_json(folder, OUTPUT_FILES["examples"], dict)
    d["models"], d["graphml"], d["models_note"] = _read_models(folder)
    summary = d["summary"].value or {}
    d["groups"] = _group_names(summary, d)
    d["alpha"] = _alpha(summary)
    return d


def _read_json(folder, name, kind):
    path = folder / name
    if not path.is_file():
        return _Input(name, note=f"{name} not found")
    try:
        with open(path, encoding="utf-8") as fh:
            value = json.load(fh, parse_constant=lambda c: float("nan"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return _Input(name, note=f"{name} could not be read ({type(exc).__name__})")
    if not isinstance(value, kind):
        return _Input(name, note=f"{name} does not hold a JSON object")
    return _Input(name, value)


def _read_csv(folder, name, numeric=(), numeric_prefix=()):
    path = folder / name
    if not path.is_file():
        return _Input(name, note=f"{name} not found")
    try:
        # Everything as text first: a token called "NA" or "null" must stay a string.
        df = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    except (OSError, UnicodeDecodeError, ValueError, pd.errors.ParserError) as exc:
        return _Input(name, note=f"{name} could not be read ({type(exc).__name__})")
    for col in df.columns:
        if col in numeric or any(col.startswith(p) for p in numeric_prefix):
            df[col] = pd.to_numeric(df[col].replace("", None), errors="coerce").astype(float)
    return _Input(name, df)


def _read_models(folder):
    pdir = folder / OUTPUT_FILES["phases"]
    if not pdir.is_dir():
        return [], [], "phases/ not found"
    models = []
    for path in sorted(pdir.glob("*.json")):
        inp = _read_json(pdir, path.name, dict)
        if inp.ok and isinstance(inp.value.get("states"), list):
            m = dict(inp.value)
            m.setdefault("group", path.stem)
            m["_file"] = f"phases/{path.name}"
            models.append(m)
    graphml = sorted(p.name for p in pdir.glob("*.graphml"))
    return models, graphml, None if models else "no phase model (phases/*.json with 'states')"


def _group_names(summary, d):
    groups = sec.group_names_of(summary)
    if groups:
        return groups
    pat = d["patterns"].value
    if pat is not None:
        found = [c[len("support_"):] for c in pat.columns if c.startswith("support_")]
        if found:
            return found
    counts = sec.counts_of(summary)
    per = counts.get("sequences_per_group") or counts.get("learners_per_group")
    if isinstance(per, dict):
        return [str(g) for g in per]
    return []


def _alpha(summary):
    value = sec.lookup(summary, "alpha")
    try:
        value = float(value)
    except (TypeError, ValueError):
        return _DEFAULT_ALPHA
    return value if math.isfinite(value) and 0 < value < 1 else _DEFAULT_ALPHA


# --------------------------------------------------------------------------- page


def _page(d, *, examples, max_patterns, max_examples):
    figs = sec.FigureIds()
    parts = [
        sec.section_intro(d),
        sec.section_overview(d, figs),
        sec.section_patterns(d, figs, examples=examples, max_patterns=max_patterns,
                             max_examples=max_examples),
        sec.section_transitions(d, figs),
        sec.section_phases(d, figs),
        sec.section_prediction(d, figs),
        sec.section_detectors(d),
        sec.section_method(d),
        sec.section_cautions(d),
    ]
    summary = d["summary"].value or {}
    version = summary.get("seqmine_version") or (summary.get("versions") or {}).get("seqmine")
    footer = f"Written by seqmine {esc(version or __version__)} from the files in this folder."
    body = "\n".join(parts)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
        "style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        "<meta name=\"referrer\" content=\"no-referrer\">\n"
        f"<title>{sec.PAGE_TITLE}</title>\n<style>\n{sec.CSS}</style>\n</head>\n<body>\n"
        f"<main>\n{body}\n</main>\n<footer>{footer}</footer>\n</body>\n</html>\n"
    )
