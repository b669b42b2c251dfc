"""The self-contained HTML report, rendered from the files of an output folder.

:func:`render_report` reads the files the pipeline wrote (names and columns listed
in the module constants below, which are the reader's contract) and writes
``report.html`` beside them: one page, inline CSS, figures as inline SVG, no
external fonts, images or links, and a Content-Security-Policy that forbids network
loads and every script except the pattern explorer's, which it allows by its SHA-256
hash (:mod:`seqmine.reporting.explorer`). Every string taken from the data (tokens,
actions, learner ids, group names, hint text, reasons) is HTML-escaped. Wide tables
and figures scroll inside their own box on narrow screens, and a print style sheet
lays the page out on A4.

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

from .._util.csvio import restore_frame
from .._util.outdir import open_new
from .._util.runrecord import has_record, output_status
from .._version import __version__
from ..config import DEFAULT_CONFIG
from ..errors import DataFileError
from . import html as hx
from . import sections as sec
from .datachecks import DATA_CHECKS_CSS, report_pause_ranges
from .evidence import findings_by_evidence
from .examples import build_examples
from .explorer import DEFAULT_MAX_ROWS, EXPLORER_SCRIPT, script_hash, section_explorer, swatch_css
from .html import esc

__all__ = [
    "render_report",
    "build_examples",
    "write_examples",
    "REPORT_FILE",
    "OUTPUT_FILES",
    "SUMMARY_KEYS",
    "REJECT_COLUMNS",
    "PATTERN_COLUMNS",
    "TRANSITION_COLUMNS",
    "PHASES_SUMMARY_KEYS",
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
    "tokens": "tokens.csv",
    "transitions": "transitions.csv",
    "phases": "phases",
    "phases_summary": "phases/phases.json",
    "state_selection": "phases/state_selection.csv",
    "occupancy": "phases/occupancy_comparison.csv",
    "early_prediction": "early_prediction.csv",
    "detectors": "detectors.json",
    "examples": "examples.json",
}

#: Keys of ``summary.json`` the report reads (all optional; dotted = nested). Counts
#: may also sit at the top level instead of under ``counts``.
SUMMARY_KEYS = {
    "seqmine_version": "version of seqmine that wrote the folder (else versions.seqmine)",
    "seed": "random seed of the run",
    "group_names": "outcome group names in display order (also accepted: groups)",
    "counts.rows_in": "event rows read from the input file",
    "counts.rows_kept": "event rows used",
    "counts.rows_rejected": "event rows rejected (listed in rejects.csv)",
    "counts.rejects_by_reason": "{reason: rows}",
    "counts.learners": "learners with at least one kept event",
    "counts.learners_per_group": "{group: learners}",
    "counts.learners_without_group": "learners with events but no outcome group",
    "counts.sequences": "sequences (one per learner, or per session)",
    "counts.sequences_per_group": "{group: sequences}",
    "counts.patterns_mined": "patterns found by the miner",
    "counts.patterns_significant": "patterns whose q value is at or below alpha",
    "patterns_surviving": "{before_adjustment, volume_adjusted, order}: patterns with q <= "
                          "alpha in q_value, q_volume, q_order",
    "patterns_by_evidence": "{order, presence, volume}: patterns per evidence value",
    "activity": "{events_per_learner, tokens_per_learner: {group: {n, mean, ...}}, test, "
                "p_value, ratio_of_means}",
    "unit_of_analysis": "'learner' or 'sequence' (session-level tests)",
    "warnings": "[{code, message, count}]; 'sessions_not_independent' labels session-level "
                "tests",
    "gain_by_group": "{group: {n, min, q1, median, q3, max}} or {group: [values]}",
    "sequence_lengths": "{group: {n, min, q1, median, q3, max}} or {group: [values]} (tokens)",
    "pause_edges_seconds": "pause bin edges in seconds, ascending (or encoding.pause.edges)",
    "pause_labels": "pause bin labels, one more than edges (or encoding.pause.labels)",
    "encoding.pause.strategy": "how pause bins were chosen",
    "encoding.pause.implicit": "labels not written as tokens",
    "encoding.unit": "'learner' or 'session'",
    "grouping": "how learners were split: text or {rule, cut points}",
    "method.presence_test": "test on pattern presence (text)",
    "method.rate_test": "test on per-sequence rates (text)",
    "method.correction": "'bh', 'holm' or 'westfall-young'",
    "method.alpha": "threshold on q values",
    "method.n_permutations": "permutations for Westfall-Young",
    "method.n_bootstrap": "bootstrap resamples behind stability",
    "method.min_support": "minimum support in at least one group",
    "method.support_unit": "what the minimum support counts: 'sequence' or 'learner'",
    "method.max_length": "longest pattern mined",
    "method.max_gap": "largest gap (tokens) between pattern items",
    "method.n_splits": "learner-level cross-validation folds of early prediction",
    "method.n_repeats": "repetitions of the k-fold split of early prediction",
    "early_prediction": "{n_splits, n_repeats, n_repeats_hmm, learners_scored, "
                        "groups_fixed_once, beats_baseline, earliest_fraction}",
    "pseudonymized": "true when learner identifiers were replaced by keyed hashes",
    "configuration": "effective configuration, shown verbatim (also accepted: config)",
    "versions": "{package: version}",
}

#: Columns of ``rejects.csv``.
REJECT_COLUMNS = {"source_row": "row number in the input file", "reason": "why it was rejected"}

#: Columns of ``patterns.csv`` (``<group>`` = each group name).
PATTERN_COLUMNS = {
    "pattern_id": "stable identifier of the pattern (examples and detectors refer to it)",
    "pattern": "tokens joined by ' > ' (required)",
    "tokens": "the tokens as a JSON list (exact; preferred over splitting 'pattern')",
    "length": "number of tokens",
    "support_<group>": "share of the group's sequences containing the pattern (0-1)",
    "p_value": "raw p value of the presence test",
    "q_value": "p value after the multiple-comparison correction",
    "p_volume": "p value of the presence test at equal activity (volume-adjusted)",
    "q_volume": "p_volume after the multiple-comparison correction",
    "p_order": "p value of the order test (patterns of two or more tokens)",
    "q_order": "p_order after the multiple-comparison correction",
    "evidence": "'order', 'presence' (beyond activity), 'volume' (activity only) or empty",
    "favours": "group the evidence favours, else empty",
    "risk_difference": "support in the first group minus support in the second",
    "odds_ratio": "odds of presence, first group over second",
    "cohens_h": "Cohen's h between the two supports",
    "cliffs_delta": "Cliff's delta of per-sequence rates",
    "cramers_v": "Cramer's V (more than two groups)",
    "q_rate": "corrected p value of the rate test",
    "stability": "share of bootstrap resamples with p <= alpha in the same direction (0-1)",
    "replication": "share of random half splits in which the evidence test holds in both "
                   "halves (0-1)",
    "redundant_of": "kept pattern this one nearly duplicates, else empty",
}

#: Columns of ``transitions.csv``.
TRANSITION_COLUMNS = {
    "group": "group name (or 'all')",
    "from": "token",
    "to": "next token",
    "count": "observed transitions",
    "probability": "share of the transitions out of 'from' that go to 'to'",
    "expected": "expected count under (quasi-)independence",
    "adjusted_residual": "adjusted residual (z-like; |value| > 1.96 is notable)",
    "yules_q": "Yule's Q of the 2x2 table of the transition (-1..1)",
    "q_pooled": "corrected p value of the difference between groups",
}

#: Keys of ``phases/phases.json`` (which model file belongs to which group).
PHASES_SUMMARY_KEYS = {
    "models": "{'pooled' or group: model file name (with .json)}",
    "n_states": "state count used for every model",
    "criterion": "how the state count was chosen",
    "n_states_at_top_of_range": "true when the chosen count is the largest tried",
    "warnings": "list of {code, message, count} raised by the phases stage",
}

#: Keys of each phase model ``phases/model_*.json`` (format version 2; version 1 used
#: ``vocab``, ``startprob``, ``transmat`` and ``emissionprob``).
PHASE_MODEL_KEYS = {
    "label": "model label (group name or 'pooled')",
    "tokens": "tokens, in the column order of emission_probabilities",
    "start_probabilities": "initial state probabilities",
    "transition_matrix": "transition matrix, list of rows (row = from state)",
    "emission_probabilities": "emission probabilities, one row per state over tokens",
    "state_labels": "short state labels (S1, S2, ...)",
    "state_names": "unique readable state names (label and most probable tokens)",
}

#: Columns of ``phases/state_selection.csv``.
STATE_SELECTION_COLUMNS = {
    "model": "model the state counts were tried on",
    "n_states": "number of states tried",
    "bic": "Bayesian information criterion (lower is better)",
    "heldout_loglik": "held-out log-likelihood (higher is better)",
    "best_bic": "true for the count with the lowest BIC",
    "best_heldout": "true for the count with the best held-out log-likelihood",
}

#: Columns of ``phases/occupancy_comparison.csv`` read by the report.
OCCUPANCY_COLUMNS = {
    "measure": "'occupancy', 'mean_dwell' or 'transition_rate'",
    "state": "state label",
    "state_name": "state name",
    "group_a": "first group of the pair",
    "group_b": "second group of the pair",
    "mean_a": "mean per-sequence value in group_a",
    "mean_b": "mean per-sequence value in group_b",
    "cliffs_delta": "Cliff's delta (positive when group_a tends higher)",
    "q_value": "Benjamini-Hochberg q value",
    "favours": "group with the higher values when significant, else empty",
}

#: Columns of ``early_prediction.csv``.
PREDICTION_COLUMNS = {
    "classifier": "name of the classifier ('majority' = the baseline)",
    "fraction": "share of each sequence observed (0-1]",
    "n_learners": "held-out learners",
    "n_repeats": "repetitions of the k-fold split behind the row",
    "accuracy": "accuracy over held-out learners",
    "balanced_accuracy": "mean of per-group recalls",
    "recall_<group>": "share of the group's learners recognised",
    "roc_auc": "area under the ROC curve",
    "<metric>_low": "lower bootstrap bound of each metric",
    "<metric>_high": "upper bootstrap bound of each metric",
    "<metric>_min": "lowest value of each metric over the repetitions",
    "<metric>_max": "highest value of each metric over the repetitions",
    "baseline_accuracy": "accuracy of always predicting the majority group",
    "beats_baseline": "true when the classifier beats the baseline (one-sided test)",
}

#: Keys of ``detectors.json``: top level and each entry of ``detectors``.
DETECTOR_KEYS = {
    "notice": "caution text of the file",
    "matching": "{max_gap, max_window, skip_pauses} used by every detector",
    "id": "identifier of the detector",
    "tokens": "list of tokens (also accepted: pattern, a list or ' > ' string)",
    "direction": "'encourage' or 'discourage'",
    "favours": "group the pattern is more common in",
    "hint": "hint text shown to learners when it fires (user-editable)",
    "priority": "number; smaller is delivered first (1 = most important)",
    "enabled": "false to switch a detector off",
    "absence": "{after_events, after_seconds}: encourage detectors fire when absent",
    "evidence": "object of evidence values (support, rate, n, p_value, q_value, effects, "
                "stability, ...)",
    "example": "one excerpt {learner, group, events}",
    "notes": "free text for reviewers",
}

#: Keys of ``examples.json``: ``{"patterns": {pattern: [excerpt, ...]}}``.
EXAMPLE_KEYS = {
    "patterns": "pattern_id (as in patterns.csv; older files: pattern text) -> list of excerpts",
    "excerpt.learner": "learner id (pseudonymised when the run was)",
    "excerpt.group": "group of the learner (optional)",
    "excerpt.events": "list of {time (s), token (or action), pause (s to next, optional), matched (bool)}",
}

_DEFAULT_ALPHA = DEFAULT_CONFIG["contrast"]["alpha"]


def render_report(out_dir, *, examples=DEFAULT_CONFIG["report"]["examples"],
                  max_patterns=DEFAULT_CONFIG["report"]["max_patterns"], max_examples=2,
                  explorer_rows=DEFAULT_CONFIG["report"]["explorer_rows"]):
    """Write ``report.html`` into an output folder, from the files in it.

    Parameters
    ----------
    out_dir : str or path-like
        Output folder of ``seqmine analyze`` (see :data:`OUTPUT_FILES`).
    examples : bool, default True
        Show example excerpts from ``examples.json`` (switch off to keep log
        excerpts out of the report).
    max_patterns : int, default 15
        Differential patterns shown in detail.
    max_examples : int, default 2
        Excerpts shown per pattern.
    explorer_rows : int, default 5000
        Most patterns placed in the pattern explorer (the most reliable first; all
        are in patterns.csv).

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
    page = _page(data, examples=examples, max_patterns=max_patterns, max_examples=max_examples,
                 explorer_rows=explorer_rows)
    target = folder / REPORT_FILE
    if target.is_symlink():  # checked first, so nothing is written at all
        open_new(target)
    tmp = folder / f".{REPORT_FILE}.seqmine-tmp-{os.getpid()}"
    try:
        with open_new(tmp, "w", newline="\n") as fh:
            fh.write(page)
        os.replace(tmp, target)  # the page appears whole, never half-written
    finally:
        if tmp.exists():
            tmp.unlink()
    return target


def write_examples(out_dir, db, patterns, **kwargs):
    """Write ``examples.json`` into an output folder (see :func:`build_examples`).

    Parameters
    ----------
    out_dir : str or path-like
    db : SequenceDB
        The encoded sequences the patterns were mined from.
    patterns : pandas.DataFrame or list
        ``patterns.csv`` as a table (its top rows by q are used: significant,
        non-redundant, at most ``max_patterns``) or a list of patterns (token lists,
        or readable text).
    **kwargs
        ``max_patterns`` (default 15), ``alpha`` (default 0.05), and the options of
        :func:`build_examples` (matching constraints, ``per_pattern``, ``context``,
        ``random_state``...).

    Returns
    -------
    pathlib.Path
    """
    max_patterns = kwargs.pop("max_patterns", DEFAULT_CONFIG["report"]["max_patterns"])
    alpha = kwargs.pop("alpha", _DEFAULT_ALPHA)
    if isinstance(patterns, pd.DataFrame):
        df = patterns
        if "redundant_of" in df.columns:
            df = df[df["redundant_of"].fillna("").astype(str).str.strip() == ""]
        top, _ = hx.top_patterns(df, alpha, max_patterns)
        groups = findings_by_evidence(df, max_patterns)
        if groups:  # the cards the report shows: order and presence findings first
            top = pd.concat([rows for kind, _, _, rows, _ in groups if kind != "volume"]
                            + [top], ignore_index=True).drop_duplicates("pattern")
        names = [hx.row_tokens(r) for _, r in top.iterrows()]
        favours = ([("" if pd.isna(f) else str(f)) for f in top["favours"]]
                   if "favours" in top.columns else None)
    else:
        names, favours = list(patterns), kwargs.pop("favours", None)
    data = build_examples(db, names, favours=favours, **kwargs)
    path = Path(out_dir) / OUTPUT_FILES["examples"]
    with open_new(path) as fh:
        fh.write(json.dumps(data, indent=1, ensure_ascii=False) + "\n")
    return path


# --------------------------------------------------------------------------- reading


class _Input:
    """One input of the report: its value, or a note why it is missing."""

    def __init__(self, name, value=None, note=None):
        self.name, self.value, self.note = name, value, note

    @property
    def ok(self):
        return self.value is not None


#: The stage of the run record that writes each file the report reads.
_FILE_STAGES = {"rejects": "load", "patterns": "contrast", "transitions": "transitions",
                "phases_summary": "phases", "state_selection": "phases", "occupancy": "phases",
                "early_prediction": "validate", "detectors": "detectors",
                "examples": "examples"}


def _read_all(folder):
    d = {}
    d["summary"] = _read_json(folder, OUTPUT_FILES["summary"], dict)
    d["rejects"] = _read_csv(folder, OUTPUT_FILES["rejects"], numeric=("source_row",))
    pattern_numbers = ("length", "p_value", "q_value", "p_volume", "q_volume", "p_order",
                       "q_order", "risk_difference", "odds_ratio", "log_odds_ratio",
                       "growth_rate", "cohens_h", "cliffs_delta", "p_rate", "q_rate", "chi2",
                       "cramers_v", "kruskal_h", "stability", "replication")
    d["patterns"] = _read_csv(folder, OUTPUT_FILES["patterns"], numeric=pattern_numbers,
                              numeric_prefix=("support_", "rate_"))
    d["tokens"] = _read_csv(folder, OUTPUT_FILES["tokens"], numeric=pattern_numbers,
                            numeric_prefix=("support_", "rate_"))
    d["transitions"] = _read_csv(
        folder, OUTPUT_FILES["transitions"],
        numeric=("count", "from_total", "to_total", "total", "expected", "probability",
                 "adjusted_residual", "yules_q", "learners", "learner_probability",
                 "p_learners", "q_learners", "p_pooled", "q_pooled"))
    d["phases_summary"] = _read_json(folder, OUTPUT_FILES["phases_summary"], dict)
    d["state_selection"] = _read_csv(
        folder, OUTPUT_FILES["state_selection"],
        numeric=("n_states", "n_parameters", "n_observations", "log_likelihood", "bic",
                 "heldout_loglik", "heldout_loglik_per_token", "loglik_per_token",
                 "train_loglik_per_token"))
    d["occupancy"] = _read_csv(
        folder, OUTPUT_FILES["occupancy"],
        numeric=("n_a", "n_b", "mean_a", "mean_b", "median_a", "median_b", "u_statistic",
                 "cliffs_delta", "p_value", "q_value"))
    d["early_prediction"] = _read_csv(
        folder, OUTPUT_FILES["early_prediction"],
        numeric=("fraction", "n_learners", "baseline_accuracy", "baseline",
                 "n_only_classifier_right", "n_only_baseline_right", "p_value"),
        numeric_prefix=("accuracy", "balanced_accuracy", "recall_", "roc_auc"))
    d["detectors"] = _read_json(folder, OUTPUT_FILES["detectors"], dict)
    d["examples"] = _read_json(folder, OUTPUT_FILES["examples"], dict)
    d["record_notes"] = _apply_record(folder, d)
    d["models"], d["graphml"], d["models_note"] = _read_models(
        folder, d["phases_summary"], blocked=d.pop("phases_blocked", None))
    summary = d["summary"].value or {}
    d["groups"] = _group_names(summary, d)
    d["alpha"] = _alpha(summary)
    return d


def _apply_record(folder, d):
    """Keep only what the folder's run record lists as written by a finished stage.

    Without a record (a folder written by hand or by an older seqmine) every file is
    used. With one, a file of a stage that was skipped or removed (or that the record
    does not list) is treated as missing, with the record's reason as the note, so the
    page never mixes files of two runs. Returns notes about files changed after the
    run (used, but said).
    """
    summary = d["summary"].value
    notes = []
    for key, stage in _FILE_STAGES.items():
        if not has_record(summary):
            break
        name = OUTPUT_FILES[key]
        ok, note = output_status(summary, folder, name, stage)
        if not ok:
            d[key] = _Input(name, note=note)
            if stage == "phases":
                d["phases_blocked"] = note
        elif note:
            notes.append(note)
    return notes


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
        df = restore_frame(pd.read_csv(path, dtype=str, keep_default_na=False,
                                       encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError, pd.errors.ParserError) as exc:
        return _Input(name, note=f"{name} could not be read ({type(exc).__name__})")
    for col in df.columns:
        if col in numeric or any(col.startswith(p) for p in numeric_prefix):
            df[col] = pd.to_numeric(df[col].replace("", None), errors="coerce").astype(float)
    return _Input(name, df)


def _read_models(folder, phases_summary, blocked=None):
    """Phase models as ``[{"group", "file", "states", "transmat"}]``, GraphML names, note."""
    pdir = folder / OUTPUT_FILES["phases"]
    if not pdir.is_dir():
        return [], [], "phases/ not found"
    if blocked:
        return [], [], blocked  # the run record says the phases are not this run's
    mapping = (phases_summary.value or {}).get("models")
    if isinstance(mapping, dict) and mapping:
        # phases.json names the files with ".json"; names without it (written before
        # that was fixed) get it added
        files = [(str(k), v if v.endswith(".json") else f"{v}.json")
                 for k, v in mapping.items() if isinstance(v, str)]
    else:
        files = [(None, p.name) for p in sorted(pdir.glob("model_*.json"))]
    models = []
    for key, name in files:
        if "/" in name or "\\" in name or name.startswith("."):
            continue  # only files directly inside phases/
        inp = _read_json(pdir, name, dict)
        if not inp.ok:
            continue
        model = sec.phase_model(inp.value)
        if model is None:
            continue
        model["group"] = key if key is not None else str(inp.value.get("label", name))
        model["file"] = f"phases/{name}"
        models.append(model)
    graphml = sorted(p.name for p in pdir.glob("*.graphml"))
    return models, graphml, None if models else "no phase model (phases/model_*.json)"


def _group_names(summary, d):
    groups = hx.group_names_of(summary)
    if groups:
        return groups
    pat = d["patterns"].value
    if pat is not None:
        found = [c[len("support_"):] for c in pat.columns if c.startswith("support_")]
        if found:
            return found
    counts = hx.counts_of(summary)
    per = counts.get("sequences_per_group") or counts.get("learners_per_group")
    if isinstance(per, dict):
        return [str(g) for g in per]
    return []


def _alpha(summary):
    value = hx.lookup(summary, "alpha")
    try:
        value = float(value)
    except (TypeError, ValueError):
        return _DEFAULT_ALPHA
    return value if math.isfinite(value) and 0 < value < 1 else _DEFAULT_ALPHA


# --------------------------------------------------------------------------- page


def _page(d, *, examples, max_patterns, max_examples, explorer_rows=DEFAULT_MAX_ROWS):
    token = hx.PAUSE_RANGES.set(report_pause_ranges(d))
    try:
        return _page_body(d, examples=examples, max_patterns=max_patterns,
                          max_examples=max_examples, explorer_rows=explorer_rows)
    finally:
        hx.PAUSE_RANGES.reset(token)


def _page_body(d, *, examples, max_patterns, max_examples, explorer_rows):
    figs = hx.FigureIds()
    explorer = section_explorer(d, max_rows=explorer_rows)
    scripted = 'id="explorer-data"' in explorer
    parts = [
        sec.section_intro(d),
        *[f'<p class="note">{esc(n)}</p>' for n in d.get("record_notes", [])],
        sec.section_overview(d, figs),
        sec.section_patterns(d, figs, examples=examples, max_patterns=max_patterns,
                             max_examples=max_examples),
        explorer,
        sec.section_tokens(d),
        sec.section_transitions(d, figs),
        sec.section_phases(d, figs),
        sec.section_prediction(d, figs),
        sec.section_detectors(d, examples=examples),
        sec.section_method(d),
        sec.section_cautions(d),
    ]
    summary = d["summary"].value or {}
    version = summary.get("seqmine_version") or (summary.get("versions") or {}).get("seqmine")
    footer = f"Written by seqmine {esc(version or __version__)} from the files in this folder."
    body = hx.wrap_figures("\n".join(parts))
    # scripts: only the explorer's, allowed by its hash; nothing may be fetched
    script_src = f"script-src {script_hash()}; " if scripted else ""
    script = f"<script>{EXPLORER_SCRIPT}</script>\n" if scripted else ""
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
        f"{script_src}style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        "<meta name=\"referrer\" content=\"no-referrer\">\n"
        f"<title>{hx.PAGE_TITLE}</title>\n<style>\n{hx.CSS}{DATA_CHECKS_CSS}{swatch_css()}"
        "</style>\n</head>\n"
        f"<body>\n<main>\n{body}\n</main>\n<footer>{footer}</footer>\n{script}</body>\n"
        "</html>\n"
    )
