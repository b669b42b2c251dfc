"""The pipeline that ties the stages together (``seqmine analyze`` / ``seqmine demo``)."""

from __future__ import annotations

import contextlib
import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ._util.csvio import write_csv
from ._util.jsonio import write_json
from ._util.progress import quiet_mode, stage_line
from ._util.warnlog import WarningLog, collect_warnings
from .config import DEFAULT_CONFIG
from .errors import DataFileError, ParameterError, SeqmineWarning
from .inputs.outcomes import Grouping, match_learners, reconcile_learner_ids

__all__ = ["Prepared", "prepare_sequences", "pseudonymize_inputs", "reconcile_inputs",
           "analyze", "AnalysisResult", "warnings_frame", "MIN_GROUP_LEARNERS",
           "LOPSIDED_RATIO", "contrast_unit", "order_patterns", "merge_summary", "mine_summary",
           "contrast_summary", "phases_summary", "validation_summary", "detectors_summary",
           "validation_pattern_params", "public_config", "run_folder_of", "rerun_stage",
           "recorded_names", "stage_output_folder", "own_stage_folder", "target_run_folder"]

#: Configuration keys that only say where work runs (left out of summary.json).
_EXECUTION_KEYS = ("n_jobs", "scheduler")

#: Fewest learners a group may have before the run stops with a message.
MIN_GROUP_LEARNERS = 2

#: A two-group numeric split whose smaller group has fewer than this share of the
#: larger group's learners is reported (``lopsided_groups``; our rule).
LOPSIDED_RATIO = 2 / 3


@dataclass
class Prepared:
    """Loaded, grouped and encoded data plus its accounting."""

    db: object
    events: pd.DataFrame
    outcomes: pd.DataFrame
    groups: pd.Series
    rejects: pd.DataFrame
    summary: dict
    encoder: object
    grouping: object


def prepare_sequences(load_result, outcomes, *, encoder, grouping=None, grouping_factory=None,
                      min_group_learners=MIN_GROUP_LEARNERS):
    """Group the learners and encode their events.

    Parameters
    ----------
    load_result : LoadResult
    outcomes : DataFrame from :func:`load_outcomes`
    encoder : Encoder (unfitted)
    grouping : Grouping, optional
    grouping_factory : callable outcomes -> Grouping, optional

    Returns
    -------
    Prepared

    Raises
    ------
    DataFileError
        When no learner has both events and an outcome, or a group is empty or has
        fewer than ``min_group_learners`` learners with events.
    """
    if grouping is None:
        grouping = grouping_factory(outcomes) if grouping_factory else Grouping()
    groups = grouping.fit(outcomes).transform(outcomes)
    mapping, report = match_learners(load_result.events, outcomes, groups)
    names = list(grouping.group_names_)
    if not mapping:
        raise DataFileError(
            "No learner has both events and a group: check that the learner identifiers "
            "in the events and the outcomes match (e.g. same spelling and case).")
    per = report["learners_per_group"]
    if len(names) < 2:
        raise DataFileError(
            f"The outcomes form only one group ({', '.join(map(repr, names))}); comparing "
            f"groups needs at least two: check the label column or use pre/post scores.")
    for name in names:
        if per.get(name, 0) < min_group_learners:
            raise DataFileError(
                f"Group {name!r} has {per.get(name, 0)} learner(s) with events (at least "
                f"{min_group_learners} needed); check the outcomes or choose another "
                f"--grouping rule.")
    _warn_about_matching(load_result, outcomes, grouping, report, names)
    db = encoder.fit(load_result.events).transform(load_result.events, groups=mapping,
                                                   group_names=names)
    if hasattr(load_result, "time_settings"):
        # how live events must be read to match (the watcher follows it)
        db.encoding["time"] = load_result.time_settings()
    summary = dict(load_result.summary())
    summary.update({
        "sequences": int(db.n_sequences),
        "tokens": int(db.n_tokens),
        "vocabulary": int(len(db.vocab)),
        "group_names": names,
        "sequences_per_group": {n: int(c) for n, c in zip(names, db.group_sizes())},
        "sequences_without_group": int((db.groups < 0).sum()),
        "learners_without_group": int(len(np.unique(db.learners[db.groups < 0]))),
        "learners_per_group": per,
        "grouping": {"rule": grouping.rule, **{k: float(v) for k, v in
                                               getattr(grouping, "thresholds_", {}).items()}},
        "outcome_kind": outcomes.attrs.get("outcome_kind", ""),
        "events_without_outcome": len(report["events_without_outcome"]),
        "outcomes_without_events": len(report["outcomes_without_events"]),
        "outcome_undefined": len(report["outcome_undefined"]),
        "learners_between_cut_points": len(report["no_group"]),
        "pause_edges_seconds": [float(e) for e in encoder.edges_],
        "pause_labels": list(encoder.labels_),
        "encoding": dict(db.encoding),
        "learners_with_several_sequences": int(
            (pd.Series(db.learners).value_counts() > 1).sum()) if db.n_sequences else 0,
    })
    if "gain" in outcomes.columns:
        g = pd.Series(outcomes["gain"].to_numpy(float), index=outcomes["learner"].to_numpy())
        summary["gain_by_group"] = {
            n: _describe(g[groups.to_numpy() == n].to_numpy()) for n in names}
    return Prepared(db=db, events=load_result.events, outcomes=outcomes, groups=groups,
                    rejects=load_result.rejects, summary=summary, encoder=encoder,
                    grouping=grouping)


def reconcile_inputs(loaded, outcomes, *, match_ids=DEFAULT_CONFIG["outcomes"]["match_ids"],
                     key=None):
    """Match learner ids between the files (:func:`reconcile_learner_ids`), then replace
    them by keyed hashes when ``key`` is given (:func:`pseudonymize_inputs`)."""
    loaded.events, outcomes = reconcile_learner_ids(
        loaded.events, outcomes, match_ids, events_source=str(loaded.path or "events"),
        outcomes_source=str(outcomes.attrs.get("path") or "outcomes"))
    if match_ids != "exact":
        loaded.events = loaded.events.sort_values(["learner", "time"], kind="mergesort") \
            .reset_index(drop=True)
    if key is not None:
        loaded, outcomes = pseudonymize_inputs(loaded, outcomes, key)
    return loaded, outcomes


def contrast_unit(unit, db=None):
    """The unit the tests count: ``"learner"`` (each learner once, sessions merged; also
    for ``"auto"``, an older spelling) or ``"sequence"`` (session-level tests)."""
    return "sequence" if unit == "sequence" else "learner"


def _warn_about_matching(load_result, outcomes, grouping, report, names):
    """``learners_without_events``, ``learners_without_outcome`` and ``lopsided_groups``."""
    ev_path = str(getattr(load_result, "path", "") or "the events")
    oc_path = str(outcomes.attrs.get("path") or "the outcomes")
    for ids, code, text in (
            (report["outcomes_without_events"], "learners_without_events",
             "learner(s) in {oc} have no usable events in {ev} (e.g. {ex}); they take no "
             "part in the analysis. Check the ids and rejects.csv."),
            (report["events_without_outcome"], "learners_without_outcome",
             "learner(s) with events in {ev} have no row in {oc} (e.g. {ex}); their events "
             "are encoded but belong to no group.")):
        if ids:
            ex = ", ".join(repr(str(x)) for x in ids[:3])
            warnings.warn(SeqmineWarning(
                f"{len(ids):,} " + text.format(oc=oc_path, ev=ev_path, ex=ex),
                code=code, count=len(ids)), stacklevel=3)
    per = report["learners_per_group"]
    if grouping.rule in ("median", "fraction") and len(names) == 2:
        sizes = [per.get(n, 0) for n in names]
        if max(sizes) and min(sizes) < LOPSIDED_RATIO * max(sizes):
            cut = getattr(grouping, "thresholds_", {})
            value = "gain" if "gain" in outcomes.columns else "score"
            ties = ""
            if value in outcomes.columns and cut:
                v = outcomes[value].to_numpy(float)
                n_tied = int(np.sum(np.isin(v, [cut["low"], cut["high"]])))
                if n_tied > 1:
                    ties = (f"; {n_tied} learners share the cut point "
                            f"{cut['low']:g}{'' if cut['low'] == cut['high'] else ' or ' + format(cut['high'], 'g')}"
                            f" and the rule puts them all on one side")
            warnings.warn(SeqmineWarning(
                f"The {grouping.rule} split gives groups of unequal size ("
                + ", ".join(f"{n} {k}" for n, k in zip(names, sizes))
                + f" learners with events){ties}; consider --grouping thresholds with cut "
                f"points of your own, or a finer outcome.",
                code="lopsided_groups", count=max(sizes) - min(sizes)), stacklevel=3)


def pseudonymize_inputs(loaded, outcomes, key):
    """Replace learner (and session) identifiers in the loaded events and outcomes by
    keyed hashes.

    Done right after loading, so no later stage or output ever sees a raw identifier.
    Empty sessions stay empty ("no session").
    """
    from .inputs.privacy import pseudonymize_frame
    events = pseudonymize_frame(loaded.events, key)
    if "session" in events.columns:  # session ids usually contain the learner's id
        events = pseudonymize_frame(events, key, "session", keep_empty=True)
    loaded.events = events.sort_values(["learner", "time"], kind="mergesort").reset_index(
        drop=True)
    kind = outcomes.attrs.get("outcome_kind")
    outcomes = pseudonymize_frame(outcomes, key)
    outcomes.attrs["outcome_kind"] = kind
    return loaded, outcomes


def _describe(values):
    from .scoring.activity import describe
    return describe(values)


# ---------------------------------------------------------------------- analyze
@dataclass(repr=False)
class AnalysisResult:
    """What :func:`analyze` computed and wrote: the result tables as pandas DataFrames
    (the same content as the files), the summary and the file paths.

    Attributes
    ----------
    out_dir : pathlib.Path
        The output folder.
    summary : dict
        The content of ``summary.json`` (plus ``stage_seconds``, the wall-clock time of
        each stage, which the file leaves out).
    files : list of pathlib.Path
        The files and folders written, in the order they were written.
    patterns : pandas.DataFrame
        The contrast table (``patterns.csv``): one row per mined pattern, most useful first.
    tokens : pandas.DataFrame
        Every single action and pause kind scored like the patterns (``tokens.csv``):
        what each group does more of.
    transitions : pandas.DataFrame
        The lag-1 transition table (``transitions.csv``).
    phases : seqmine.phases.PhaseResult or None
        The phase models and their tables (``selection``, ``states``,
        ``path_comparison``, ``alignment``, ``aligned_transitions``, ``distances``,
        ``excluded``); written to ``phases/``. None when phases were switched off.
    early_prediction : pandas.DataFrame or None
        Early-prediction metrics per classifier and fraction (``early_prediction.csv``);
        None when validation was switched off.
    detectors : pandas.DataFrame
        One row per exported detector (the ``detectors`` list of ``detectors.json``).
    rejects : pandas.DataFrame
        Event rows that could not be used, with the reason (``rejects.csv``).
    warnings : pandas.DataFrame
        Each distinct warning of the run: ``code``, ``message``, ``count`` (as in
        ``summary.json``).
    """

    out_dir: object
    summary: dict
    files: list
    patterns: pd.DataFrame = None
    tokens: pd.DataFrame = None
    transitions: pd.DataFrame = None
    phases: object = None
    early_prediction: pd.DataFrame = None
    detectors: pd.DataFrame = None
    rejects: pd.DataFrame = None
    warnings: pd.DataFrame = field(default_factory=lambda: warnings_frame([]))

    @property
    def report(self):
        """Path of ``report.html`` (None if it was not written)."""
        return next((Path(f) for f in self.files if str(f).endswith("report.html")), None)

    def __repr__(self):
        s = self.summary
        groups = ", ".join(f"{g} {n}" for g, n in (s.get("sequences_per_group") or {}).items())
        lines = [f"AnalysisResult(out_dir={str(self.out_dir)!r})",
                 f"  {s.get('sequences', 0)} sequences ({groups}); "
                 f"{s.get('patterns_mined', 0)} patterns mined, "
                 f"{s.get('patterns_significant', 0)} significant; "
                 f"{s.get('detectors', 0)} detectors; {len(self.warnings)} warning(s)"]
        tables = [(name, getattr(self, name)) for name in
                  ("patterns", "tokens", "transitions", "early_prediction", "detectors",
                   "rejects", "warnings")]
        shapes = ", ".join(f"{name} {t.shape[0]}x{t.shape[1]}" for name, t in tables
                           if isinstance(t, pd.DataFrame))
        lines.append(f"  tables: {shapes}")
        if self.phases is not None:
            lines.append(f"  phases: {self.phases.n_states} states, models "
                         f"{', '.join(self.phases.models)}")
        if self.report is not None:
            lines.append(f"  report: {self.report}")
        return "\n".join(lines)

    def message(self):
        """One-paragraph description for the command line."""
        s = self.summary
        rep = [f for f in self.files if str(f).endswith("report.html")]
        lines = [f"seqmine: {s.get('rows_kept', 0)} of {s.get('rows_in', 0)} rows kept "
                 f"({s.get('rows_rejected', 0)} rejected), {s.get('sequences', 0)} sequences, "
                 f"{s.get('patterns_mined', 0)} patterns mined, "
                 f"{s.get('patterns_significant', 0)} significant."]
        lines.append(f"Results in {self.out_dir}")
        if rep:
            lines.append(f"Report: {rep[0]}")
        return "\n".join(lines)


def warnings_frame(records):
    """The warnings of a run (:class:`~seqmine._util.warnlog.RunWarning` records or
    ``{"code", "message", "count"}`` dicts) as a DataFrame with those three columns.

    Examples
    --------
    >>> warnings_frame([{"code": "tied_times", "message": "Ties.", "count": 3}])
             code message  count
    0  tied_times   Ties.      3
    """
    rows = [r if isinstance(r, dict) else r.as_dict() for r in records]
    frame = pd.DataFrame(rows, columns=["code", "message", "count"])
    frame["count"] = frame["count"].astype("Int64")
    return frame


def _versions():
    import importlib.metadata as md
    import platform

    from ._version import __version__
    out = {"seqmine": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "pandas", "scipy", "scikit-learn", "hmmlearn", "networkx", "matplotlib"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:  # pragma: no cover
            out[pkg] = None
    return out


def analyze(events_path, outcomes_path, out_dir, config=None, *, quiet=False):
    """Run the whole pipeline, write the output folder and return the results.

    The same as ``seqmine analyze EVENTS --outcomes OUTCOMES --out OUT_DIR``: with the
    same settings the files are byte-identical. The whole configuration is checked
    before anything is read. The folder is written as one step: the run is built in a
    temporary folder beside ``out_dir`` and swapped into place when every file is
    written, so ``out_dir`` holds either the previous complete run or the new one, never
    a mix (see :mod:`seqmine._util.outdir`). ``summary.json`` records which stages ran
    with which settings and inputs and what each wrote (:mod:`seqmine._util.runrecord`).

    With ``config["n_jobs"] > 1`` mining partitions, Westfall-Young permutation
    batches, phase-model fits and validation folds run in local processes (at most as
    many as there are cores); with ``config["scheduler"]`` (a Dask address or
    ``"local"``) on a Dask cluster, connected once for the whole run. The outputs are
    identical to a serial run.

    Parameters
    ----------
    events_path, outcomes_path : str or Path
        Files, named pipes, or ``"-"`` for standard input (one of the two).
    out_dir : str or Path
        The output folder: new, empty, or written by an earlier seqmine run (which is
        replaced as a whole). A folder holding other files, a symbolic link, or a folder
        holding an input is refused.
    config : dict, str or Path, optional
        Settings over the defaults (:data:`seqmine.config.DEFAULT_CONFIG`): a nested
        dict with only the keys to change, e.g. ``{"mine": {"min_support": 0.3}}``, a
        whole configuration (:func:`seqmine.config.load_config`), or the path of a TOML
        file. Unknown keys are errors that name the closest valid key.
    quiet : bool
        No progress bars or stage lines.

    Returns
    -------
    AnalysisResult
        The result tables as DataFrames, the summary and the paths of the files.
    """
    from ._util.outdir import writing_folder
    from ._util.parallel import effective_jobs, using_scheduler
    from .config import check_config
    from .inputs.sources import STDIN, regular_input

    cfg = check_config(_settings(config))
    _preflight(cfg)
    if str(events_path) == STDIN and str(outcomes_path) == STDIN:
        raise ParameterError("Only one of EVENTS and --outcomes can be '-' (standard input); "
                             "give the other as a file.")
    scheduler = cfg.get("scheduler") or None
    if scheduler in (None, "local"):
        with (quiet_mode(True) if quiet else contextlib.nullcontext()):
            cfg = dict(cfg, n_jobs=effective_jobs(int(cfg["n_jobs"]), notify=True))
    log = WarningLog()
    inputs = [events_path, outcomes_path, cfg["encode"]["mapping"],
              cfg["privacy"]["pseudonymize_key"]]
    with writing_folder(out_dir, "--out", inputs=inputs, owned=recorded_names(out_dir)) as staging:
        with regular_input(events_path, "events", max_bytes=cfg["events"]["max_bytes"]) as ev, \
                regular_input(outcomes_path, "outcomes") as oc, \
                (quiet_mode(True) if quiet else contextlib.nullcontext()), \
                using_scheduler(scheduler, int(cfg["n_jobs"])), collect_warnings(log):
            # quiet=False leaves the caller's setting (the command line's --quiet)
            result = _analyze(ev, oc, staging, cfg, log=log)
    result.files = [staging.shown(f) for f in result.files]
    result.out_dir = staging.target
    return result


def _settings(config):
    """The configuration of a run: defaults, a TOML file, or a (partial) dict over them."""
    from .config import default_config, load_config, merge_config
    if config is None:
        return default_config()
    if isinstance(config, (str, os.PathLike)):
        return load_config(config)
    return merge_config(default_config(), config, source="analyze(config=...)")


def run_folder_of(path):
    """The output folder with a run record that ``path`` is or lies in (None when there is
    none). Sub-commands writing there re-run their stage in that run.

    Examples
    --------
    >>> run_folder_of("no/such/folder") is None
    True
    """
    from ._util.runrecord import has_record, read_summary
    if path is None or not str(path).strip():
        return None
    p = Path(os.path.abspath(path))
    for folder in (p, *p.parents):
        if folder.is_dir() and not folder.is_symlink() and has_record(read_summary(folder)):
            return folder
    return None


def target_run_folder(source=None, out=None, *, out_is_folder=False):
    """The output folder a sub-command re-runs its stage in, or None (it then writes
    ordinary files): ``source`` (its input argument) when that is an output folder with
    a run record, else the one ``out`` is or lies in (with ``out_is_folder``: only when
    ``out`` is that folder itself)."""
    if source is not None:
        given = Path(source)
        if given.is_dir() and run_folder_of(given) == given.absolute():
            return given.absolute()
    if out is None:
        return None
    folder = run_folder_of(out)
    if out_is_folder and folder != Path(out).absolute():
        return None
    return folder


def recorded_names(folder):
    """Top-level names of the files a folder's run record lists (empty without one)."""
    from ._util.runrecord import has_record, read_summary
    summary = read_summary(folder) if folder is not None and Path(folder).is_dir() else None
    if not has_record(summary):
        return set()
    return {rel.split("/")[0] for entry in summary["stages"].values()
            if isinstance(entry, dict) for rel in (entry.get("outputs") or {})}


def stage_output_folder(folder, stage, marker):
    """The sub-folder of a run folder written by ``stage`` (the one holding ``marker``,
    e.g. ``sequences.json``), or None when the record lists none."""
    from ._util.runrecord import read_summary
    entry = (read_summary(folder) or {}).get("stages", {}).get(stage) or {}
    if entry.get("status") != "done":
        return None
    for rel in entry.get("outputs") or {}:
        parts = rel.split("/")
        if parts[-1] == marker:
            return Path(folder, *parts[:-1])
    return None


#: What each stage's sub-folder is called in messages, and the file that marks it.
_STAGE_FOLDERS = {"encode": ("sequence database", "sequences.json"),
                  "mine": ("pattern set", "patternset.json")}


def own_stage_folder(folder, stage, given=None):
    """The sub-folder of the output ``folder`` that ``stage`` wrote (``sequences/`` of
    ``encode``, the pattern set of ``mine``), checking that ``given`` (a path the user
    named as input, if any) is that folder or the output folder itself: results written
    into a run must come from that run.

    Raises
    ------
    DataFileError
        When the record lists no such folder.
    OutputError
        When ``given`` is another folder.
    """
    from .errors import OutputError
    what, marker = _STAGE_FOLDERS[stage]
    own = stage_output_folder(folder, stage, marker)
    if own is None:
        raise DataFileError(f"{folder}: the run record lists no {what}; run 'seqmine "
                            f"{'encode' if stage == 'encode' else 'mine'}' into it first.")
    allowed = {Path(folder).resolve(), own.resolve(), (own / "patterns.csv").resolve()}
    if given and Path(given).resolve() not in allowed:
        raise OutputError(f"{given} is not the {what} of the run in {folder}; results "
                          f"written there must come from its own {what} ({own}); write to "
                          f"another folder to use another.")
    return own


def rerun_stage(folder, stage, command, work, *, settings, inputs=None, outside_inputs=(),
                config_section=None, config_values=None):
    """Re-run one stage in an existing output folder as one step.

    The folder is cloned beside itself (hard links), the stage's previous outputs and
    those of every stage depending on it are removed from the clone (and marked
    ``removed`` in the record, with the summary keys they owned), ``work(staging)``
    writes the new outputs into ``staging.path`` and returns ``(summary fragment,
    result)``, the record is updated, and the clone is swapped into place. A failure
    anywhere leaves the folder as it was.

    Parameters
    ----------
    folder : path-like
        An output folder with a run record (see :func:`run_folder_of`).
    stage, command : str
    work : callable
    settings : dict
        The settings recorded for the stage.
    inputs : dict, optional
        Recorded inputs (default: the stages it depends on).
    outside_inputs : iterable of path-like
        Files read from outside the folder (refused when they lie inside it).
    config_section : str, optional
        Section of ``summary.json``'s ``configuration`` updated with ``config_values``.

    Returns
    -------
    (result of work, pathlib.Path of the folder, list of the stages removed)
    """
    from ._util.outdir import writing_folder
    from ._util.runrecord import DEPENDS, RunRecord, new_files, read_summary, snapshot
    from .errors import OutputError
    previous = read_summary(folder)
    with writing_folder(folder, "--out", inputs=outside_inputs, update=True) as st:
        record = RunRecord(command, previous)
        for rel in record.rerun(stage):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(st.path / rel)
        _prune_empty_folders(st.path)
        summary = {k: v for k, v in previous.items()
                   if k not in ("stages", "history", "record_version")}
        write_json(st.path / "summary.json", record.apply(summary))
        before = snapshot(st.path)
        fragment, result = work(st)
        outputs = {k: v for k, v in new_files(st.path, before).items() if k != "summary.json"}
        others = {rel.split("/")[0]: s for s in record.stages if s != stage
                  and record.status(s) == "done" for rel in record.outputs(s)}
        for rel in outputs:
            if rel.split("/")[0] in others:
                raise OutputError(
                    f"{st.target / rel.split('/')[0]} belongs to the {others[rel.split('/')[0]]} "
                    f"stage of this run; give the {stage} results another name.")
        owned = merge_summary(summary, fragment or {})
        if config_section and isinstance(summary.get("configuration"), dict):
            section = summary["configuration"].setdefault(config_section, {})
            section.update({k: v for k, v in (config_values or {}).items() if k in section})
        if inputs is None:
            inputs = {d: {"stage": d} for d in DEPENDS[stage] if record.status(d) == "done"}
        record.done(stage, settings=settings, inputs=inputs, outputs=outputs,
                    summary_keys=owned)
        write_json(st.path / "summary.json", record.apply(summary))
    return result, st.target, list(record.removed)


def _prune_empty_folders(root):
    for dirpath, _dirs, _files in os.walk(root, topdown=False):
        if dirpath != str(root) and not os.listdir(dirpath):
            os.rmdir(dirpath)


def _preflight(cfg):
    """Checks that need more than the option rules (the symbol template, the mapping and
    key files, the hidden Markov model options of validation), done before anything is
    read or written."""
    from .encoding.encoder import encoder_from_settings
    from .inputs.privacy import read_key
    from .inputs.clock import resolve_timezone
    encoder_from_settings(cfg["encode"])._check_params()
    resolve_timezone(cfg["events"]["timezone"])
    if cfg["privacy"]["pseudonymize_key"]:
        read_key(cfg["privacy"]["pseudonymize_key"])
    if cfg["validate"]["enabled"]:
        from .validation.features import HMMLikelihoodFeaturizer
        allowed = set(HMMLikelihoodFeaturizer().get_params()) - {"random_state"}
        unknown = sorted(set(cfg["validate"].get("hmm") or {}) - allowed)
        if unknown:
            raise ParameterError(
                f"configuration: unknown option 'validate.hmm.{unknown[0]}'; the options are "
                f"{', '.join(sorted(allowed))}.")


def _input_entry(pair):
    """Record entry of an input read from ``pair`` = (regular file, shown name)."""
    from ._util.runrecord import file_input
    from .inputs.sources import STDIN, STDIN_NAME
    return file_input(pair[0], shown=STDIN if pair[1] == STDIN_NAME else pair[1])


def _analyze(ev, oc, staging, cfg, *, log):
    from ._util.runrecord import RunRecord
    from .encoding.encoder import encoder_from_settings
    from .inputs.load import load_events
    from .inputs.outcomes import load_outcomes
    from .inputs.privacy import key_fingerprint, read_key
    from .mining.miner import note_sequence_support, save_patternset
    from .mining.partitions import mine_parallel
    from .reporting.render import render_report, write_examples
    from .scoring.activity import activity_comparison
    from .scoring.transitions import transitions

    _check_evidence_options(cfg)
    out = staging.path
    record = RunRecord("analyze")
    run = _RunStages(out, record)
    files = []
    ev_cfg, oc_cfg, en_cfg = cfg["events"], cfg["outcomes"], cfg["encode"]
    seed = int(cfg["seed"])
    jobs = int(cfg["n_jobs"])
    scheduler = cfg.get("scheduler") or None

    # 1. load and validate
    key_path = cfg["privacy"]["pseudonymize_key"]
    key = read_key(key_path) if key_path else None
    load_inputs = {}  # filled once the files have been read (a missing file says so first)
    privacy = {"pseudonymized": key is not None,
               "key_fingerprint": key_fingerprint(key) if key is not None else None}
    with run.stage("load", "loading", {"events": ev_cfg, "outcomes": oc_cfg,
                                        "privacy": privacy}, inputs=load_inputs):
        columns = {role: ev_cfg[f"{role}_column"] for role in
                   ("learner", "time", "action", "session", "target", "channel")}
        loaded = load_events(ev[0], columns=columns, format=ev_cfg["format"],
                             delimiter=ev_cfg["delimiter"], encoding=ev_cfg["encoding"],
                             duplicates=ev_cfg["duplicates"], max_bytes=ev_cfg["max_bytes"],
                             time_unit=ev_cfg["time_unit"], timezone=ev_cfg["timezone"],
                             decimal_comma=ev_cfg["decimal_comma"])
        outcomes = load_outcomes(oc[0], columns={
            k: oc_cfg[f"{k}_column"] for k in ("learner", "pre", "post", "max", "score", "label")},
            max_score=oc_cfg["max_score"], decimal_comma=ev_cfg["decimal_comma"])
        loaded, outcomes = reconcile_inputs(loaded, outcomes, match_ids=oc_cfg["match_ids"],
                                            key=key)
        load_inputs.update(events=_input_entry(ev), outcomes=_input_entry(oc))
        write_csv(loaded.rejects, out / "rejects.csv")
        files.append(out / "rejects.csv")

    # 2. group and encode
    rule = oc_cfg["grouping"] or ("label" if outcomes.attrs.get("outcome_kind") == "label"
                                  else "median")
    grouping = Grouping(rule, fraction=oc_cfg["fraction"], low=oc_cfg["low"], high=oc_cfg["high"])
    encoder = encoder_from_settings(en_cfg)
    enc_inputs = {"load": {"stage": "load"}}
    if en_cfg.get("mapping"):
        enc_inputs["mapping"] = _input_entry((en_cfg["mapping"], en_cfg["mapping"]))
    with run.stage("encode", "encoding", {**en_cfg, "grouping": rule}, inputs=enc_inputs):
        prepared = prepare_sequences(loaded, outcomes, encoder=encoder, grouping=grouping)
        db = prepared.db
        db.save(out / "sequences")
    summary = dict(prepared.summary)

    # 3. mine and score
    mine_cfg, con_cfg = cfg["mine"], cfg["contrast"]
    if mine_cfg["max_gap"] is not None and mine_cfg["max_gap"] < 0:  # -1 = no limit
        mine_cfg = dict(mine_cfg, max_gap=None)
    with run.stage("mine", "mining patterns", mine_cfg) as owned:
        patternset = mine_parallel(db, n_jobs=jobs, scheduler=scheduler,
                          min_support=mine_cfg["min_support"],
                          min_length=mine_cfg["min_length"], max_length=mine_cfg["max_length"],
                          max_gap=mine_cfg["max_gap"], max_window=mine_cfg["max_window"],
                          skip_pauses=mine_cfg["skip_pauses"],
                          start_with_action=mine_cfg["start_with_action"],
                          end_with_action=mine_cfg["end_with_action"], closed=mine_cfg["closed"],
                          maximal=mine_cfg["maximal"], max_patterns=mine_cfg["max_patterns"],
                          support_unit=mine_cfg["support_unit"])
        save_patternset(patternset, out / "patternset")
        note_sequence_support(db, mine_cfg["min_support"], mine_cfg["support_unit"])
        owned += merge_summary(summary, mine_summary(patternset, mine_cfg))
    alpha = float(con_cfg["alpha"])
    unit = contrast_unit(con_cfg["unit"], db)
    with run.stage("contrast", "scoring patterns", {**con_cfg, "seed": seed}) as owned:
        table, tokens = score_patterns(patternset, db, con_cfg, unit, random_state=seed,
                                       n_jobs=jobs, scheduler=scheduler)
        write_csv(table, out / "patterns.csv")
        write_csv(tokens, out / "tokens.csv")
        files += [out / "patterns.csv", out / "tokens.csv"]
        owned += merge_summary(summary, contrast_summary(table, con_cfg, unit, tokens))
    with run.stage("transitions", "transitions", cfg["transitions"]):
        trans = transitions(db, exclude_pauses=cfg["transitions"]["exclude_pauses"])
        write_csv(trans, out / "transitions.csv")
        files.append(out / "transitions.csv")
    summary["sequence_lengths"] = {name: _describe(db.lengths[db.groups == g].astype(float))
                                   for g, name in enumerate(db.group_names)}
    summary["activity"] = activity_comparison(db)

    # 4. phases of work
    ph_cfg = cfg["phases"]
    phases = validation = None
    if not ph_cfg["enabled"]:
        record.skip("phases", "switched off (phases.enabled = false, --no-phases)")
    else:
        from .phases import fit_phases
        with run.stage("phases", "phase models", {**ph_cfg, "seed": seed}) as owned:
            phase_db = _sample_sequences(db, ph_cfg.get("max_sequences"), seed)
            phases = fit_phases(phase_db,
                                n_states=range(ph_cfg["min_states"], ph_cfg["max_states"] + 1),
                                n_restarts=ph_cfg["n_restarts"], random_state=seed,
                                n_jobs=-1 if scheduler else jobs,
                                n_iter=ph_cfg["n_iter"], tol=ph_cfg["tol"],
                                criterion=ph_cfg["criterion"], n_splits=ph_cfg["n_splits"],
                                all_splits=ph_cfg["all_splits"],
                                n_permutations=ph_cfg["n_permutations"])
            phases.save(out / "phases")
            files.append(out / "phases")
            owned += merge_summary(summary, phases_summary(phases, phase_db))

    # 5. early prediction: the whole discovery pipeline re-run inside learner folds
    va_cfg = cfg["validate"]
    if not va_cfg["enabled"]:
        record.skip("validate", "switched off (validate.enabled = false, --no-validate)")
    else:
        from sklearn.base import clone

        from .validation.crossval import default_featurizers, validate
        pattern_params = validation_pattern_params(mine_cfg, con_cfg, va_cfg)
        with run.stage("validate", "early prediction",
                       {**va_cfg, "seed": seed, "patterns": pattern_params}) as owned:
            feats = default_featurizers(random_state=seed, pattern_params=pattern_params,
                                        hmm_params=dict(va_cfg.get("hmm") or {}))
            va_events, va_outcomes = _sample_learners(prepared.events, prepared.outcomes,
                                                      va_cfg.get("max_learners"), seed)
            # the groups are the labels being predicted: the grouping fitted once on the
            # outcome table (prepare_sequences) is used unchanged in every fold
            validation = validate(
                va_events, va_outcomes, n_splits=int(va_cfg["n_splits"]),
                n_repeats=int(va_cfg["n_repeats"]), n_repeats_hmm=int(va_cfg["n_repeats_hmm"]),
                fractions=va_cfg["fractions"], grouping=prepared.grouping,
                encoder=clone(encoder), featurizers=feats,
                n_bootstrap=int(va_cfg["n_bootstrap"]), alpha=alpha, random_state=seed,
                n_jobs=jobs, scheduler=scheduler)
            write_csv(validation.metrics, out / "early_prediction.csv")
            files.append(out / "early_prediction.csv")
            owned += merge_summary(summary, validation_summary(
                validation, va_cfg, int(va_events["learner"].nunique())))

    # 6. detectors
    de_cfg = cfg["detectors"]
    with run.stage("detectors", "detectors", de_cfg) as owned:
        from .detection.detectors import export_detectors, save_detectors
        doc = export_detectors(table, db, patternset.constraints, max_q=float(de_cfg["max_q"]),
                               min_effect=float(de_cfg["min_effect"]), effect=de_cfg["effect"],
                               min_stability=float(de_cfg["min_stability"]),
                               max_detectors=de_cfg["max_detectors"],
                               evidence=_evidence_option(de_cfg["evidence"]),
                               encourage_share=de_cfg["encourage_share"],
                               **_absence_option(de_cfg["absence_quantile"]),
                               examples=bool(de_cfg["examples"]), random_state=seed)
        save_detectors(doc, out / "detectors.json")
        files.append(out / "detectors.json")
        owned += merge_summary(summary, detectors_summary(doc))

    # 7. examples and report
    rep_cfg = cfg["report"]
    if not rep_cfg["examples"]:
        record.skip("examples", "switched off (report.examples = false, --no-examples)")
    else:
        c = patternset.constraints
        with run.stage("examples", "examples", {"max_patterns": int(rep_cfg["max_patterns"]),
                                                "seed": seed}):
            files.append(write_examples(
                out, db, table, max_patterns=int(rep_cfg["max_patterns"]), alpha=alpha,
                max_gap=c.get("max_gap"), max_window=c.get("max_window"),
                skip_pauses=bool(c.get("skip_pauses", False)), random_state=seed))
    summary["seed"] = seed
    # execution settings change where the work runs, never the results: they are left
    # out so that summary.json is identical whatever --jobs / --scheduler was used
    summary["configuration"] = public_config(cfg)
    summary["versions"] = _versions()
    summary["pseudonymized"] = key is not None
    summary["warnings"] = log.as_list()
    write_json(out / "summary.json", record.apply(summary))
    with run.stage("report", "report", rep_cfg, inputs=run.done_inputs()):
        report = render_report(out, examples=bool(rep_cfg["examples"]),
                               max_patterns=int(rep_cfg["max_patterns"]),
                               explorer_rows=int(rep_cfg["explorer_rows"]))
        files.append(report)
    write_json(out / "summary.json", record.apply(summary))
    files.append(out / "summary.json")
    summary = dict(record.apply(summary), stage_seconds=run.seconds)
    return AnalysisResult(
        out_dir=out, summary=summary, files=files, patterns=table, tokens=tokens,
        transitions=trans,
        phases=phases, early_prediction=None if validation is None else validation.metrics,
        detectors=pd.DataFrame(doc.get("detectors", [])), rejects=loaded.rejects,
        warnings=warnings_frame(log))


def public_config(cfg):
    """The configuration as summary.json shows it: without the execution settings (where
    the work ran never changes the results)."""
    return {k: v for k, v in cfg.items() if k not in _EXECUTION_KEYS}


def merge_summary(summary, fragment):
    """Put ``fragment`` into ``summary`` (objects such as ``method`` merged key by key);
    returns the keys set, dotted for entries of merged objects (``method.alpha``)."""
    owned = []
    for key, value in fragment.items():
        if isinstance(value, dict) and key == "method":
            summary.setdefault(key, {}).update(value)
            owned += [f"{key}.{k}" for k in value]
        else:
            summary[key] = value
            owned.append(key)
    return owned


def mine_summary(patternset, mine_cfg):
    """The summary keys the mining stage owns."""
    return {"patterns_mined": int(patternset.n_patterns),
            "method": {"min_support": mine_cfg["min_support"],
                       "support_unit": mine_cfg.get("support_unit", DEFAULT_CONFIG["mine"]["support_unit"]),
                       "max_length": mine_cfg["max_length"], "max_gap": mine_cfg["max_gap"]}}


def score_patterns(patternset, db, con_cfg, unit, *, random_state, n_jobs=1, scheduler=None):
    """The contrast stage: the contrast table of the mined patterns and the table of single
    tokens (every action and pause kind, scored whatever ``min_length`` is, in a
    correction family of its own: what each group does more of). Used by ``analyze`` and
    by a contrast re-run in an output folder."""
    from .scoring.contrast import contrast
    options = dict(correction=con_cfg["correction"], alpha=con_cfg["alpha"],
                   n_permutations=con_cfg["n_permutations"], random_state=random_state,
                   n_replication_splits=con_cfg["n_replication_splits"],
                   n_volume_strata=con_cfg["n_volume_strata"], unit=unit, n_jobs=n_jobs,
                   scheduler=scheduler)
    table = order_patterns(contrast(patternset, db, redundancy=con_cfg["redundancy"],
                                    n_bootstrap=con_cfg["n_bootstrap"], **options))
    return table, score_tokens(db, **options)


def score_tokens(db, **options):
    """Every action and pause kind of ``db`` scored like a pattern (a ``kind`` column says
    which), as its own correction family; ``options`` are :func:`contrast`'s."""
    from .mining.miner import mine
    from .scoring.contrast import contrast
    singles = mine(db, min_support=1, min_length=1, max_length=1,
                   start_with_action=False, end_with_action=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        tokens = contrast(singles, db, redundancy=None, n_bootstrap=0, **options)
    for w in caught:  # re-issued; the one on presence is about tokens here, not patterns
        if getattr(w.message, "code", None) == "no_variation":
            warnings.warn(SeqmineWarning(
                "Every action and pause kind is in all of the compared units or in none, so "
                "the presence tests of tokens.csv cannot tell the groups apart (p = 1); what "
                "each group does more of shows in its rate columns (p_rate, q_rate).",
                code="tokens_no_variation"), stacklevel=2)
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    tokens.insert(2, "kind", np.where(
        tokens["pattern"].map(dict(zip(db.vocab, db.is_pause))), "pause", "action"))
    return order_patterns(tokens)


def contrast_summary(table, con_cfg, unit="sequence", tokens=None):
    """The summary keys the contrast stage owns (counts of significant patterns, what
    survives each adjustment, and the statements of the method section); ``unit`` is
    what was compared (``sequence`` or ``learner``)."""
    alpha = float(con_cfg["alpha"])
    significant = table[table["q_value"] <= alpha]
    distinct = (int((significant["redundant_of"].fillna("") == "").sum())
                if "redundant_of" in significant else int(len(significant)))
    out = {
        "patterns_significant": int(len(significant)),
        "patterns_significant_distinct": distinct,
        "patterns_surviving": _surviving(table, alpha),
        "patterns_by_evidence": _by_evidence(table),
        "unit_of_analysis": table.attrs.get("unit", unit),
        "method": {
            "presence_test": f"Fisher's exact test (two-sided) on presence per {unit}",
            "volume_test": "Cochran-Mantel-Haenszel test of presence across "
                           f"{table.attrs.get('n_volume_strata', 0)} strata of events per "
                           f"{unit}",
            "order_test": "the same stratified test among the units that hold every item "
                          "of the pattern",
            "rate_test": "Mann-Whitney U on occurrences per 100 tokens",
            "transition_test": "Welch's t test on each learner's share of transitions "
                               "(learner level); adjusted residuals are pooled description",
            "correction": con_cfg["correction"], "alpha": alpha, "unit": unit,
            "n_permutations": int(con_cfg["n_permutations"]),
            "n_bootstrap": int(con_cfg["n_bootstrap"]),
            "n_replication_splits": int(con_cfg.get("n_replication_splits", 0)),
        },
    }
    if tokens is not None:
        out["tokens_by_evidence"] = _by_evidence(tokens)
    return out


def phases_summary(phases, phase_db):
    """The summary keys the phases stage owns."""
    return {"phases": {"n_states": int(phases.n_states),
                       "sequences_sampled": int(phase_db.n_sequences)}}


def validation_summary(validation, va_cfg, n_learners):
    """The summary keys the early-prediction stage owns: whether and from when any
    classifier beat the majority baseline, the design (folds, repetitions) and the
    learners scored (the groups are fixed once, so every grouped learner is)."""
    digest = validation.summary()
    settings = validation.settings
    early = {k: digest[k] for k in ("earliest_fraction", "earliest_fraction_sustained",
                                    "beats_baseline") if k in digest}
    early.update(learners_sampled=int(n_learners),
                 learners_scored=int(settings["n_learners"]),
                 n_splits=settings["n_splits"], n_repeats=int(settings["n_repeats"]),
                 n_repeats_hmm=int(settings["n_repeats_hmm"]), groups_fixed_once=True)
    return {"early_prediction": early,
            "method": {"n_splits": va_cfg["n_splits"], "n_repeats": va_cfg["n_repeats"],
                       "n_repeats_hmm": va_cfg["n_repeats_hmm"]}}


def detectors_summary(doc):
    """The summary keys the detectors stage owns: how many detectors, per direction."""
    dets = doc.get("detectors", [])
    return {"detectors": len(dets),
            "detectors_by_direction": {d: sum(x["direction"] == d for x in dets)
                                       for d in ("encourage", "discourage")}}


def validation_pattern_params(mine_cfg, con_cfg, va_cfg):
    """Pattern-discovery settings used inside each validation fold."""
    params = {k: mine_cfg[k] for k in (
        "min_support", "min_length", "max_length", "max_gap", "max_window", "skip_pauses",
        "start_with_action", "end_with_action", "max_patterns", "support_unit")}
    params.update(correction="bh" if con_cfg["correction"] == "westfall-young"
                  else con_cfg["correction"], alpha=float(con_cfg["alpha"]),
                  top_k=int(va_cfg["top_k"]))
    return params


class _RunStages:
    """Times each stage, shows which one runs (to stderr, unless quiet) and records what
    it wrote in the run record."""

    def __init__(self, out, record):
        self.out = out
        self.record = record
        self.seconds = {}

    @contextlib.contextmanager
    def stage(self, name, label, settings, inputs=None):
        from ._util.runrecord import DEPENDS, new_files, snapshot
        stage_line(f"{label} ...")
        t0 = time.perf_counter()
        before = snapshot(self.out)
        owned = []
        yield owned
        self.seconds[label] = round(time.perf_counter() - t0, 3)
        if inputs is None:
            inputs = {d: {"stage": d} for d in DEPENDS[name]}
        written = {k: v for k, v in new_files(self.out, before).items() if k != "summary.json"}
        self.record.done(name, settings=settings, inputs=inputs, outputs=written,
                         summary_keys=owned)

    def done_inputs(self):
        return {s: {"stage": s} for s in self.record.ran}


def _sample_sequences(db, limit, seed):
    """``db``, or a seeded random subset of ``limit`` sequences (kept in their order)."""
    if limit is None or db.n_sequences <= int(limit):
        return db
    rng = np.random.default_rng([seed, 11])
    return db.subset(np.sort(rng.choice(db.n_sequences, int(limit), replace=False)))


def _sample_learners(events, outcomes, limit, seed):
    """Events and outcomes of at most ``limit`` learners drawn at random (seeded)."""
    learners = pd.unique(events["learner"])
    if limit is None or len(learners) <= int(limit):
        return events, outcomes
    rng = np.random.default_rng([seed, 12])
    keep = set(np.sort(rng.choice(np.asarray(learners, dtype=object), int(limit),
                                  replace=False)).tolist())
    return (events[events["learner"].isin(keep)].reset_index(drop=True),
            outcomes[outcomes["learner"].isin(keep)].reset_index(drop=True))


def order_patterns(table):
    """Most useful first: by evidence (order, presence, volume, none), then by q value,
    then by pattern."""
    rank = {"order": 0, "presence": 1, "volume": 2}
    ev = table["evidence"].map(rank).fillna(3) if "evidence" in table else 3
    order = table.assign(_ev=ev, _sig=table["q_value"].isna()).sort_values(
        ["_ev", "_sig", "q_value", "p_value", "length", "pattern"], kind="mergesort")
    return order.drop(columns=["_ev", "_sig"]).reset_index(drop=True)


def _surviving(table, alpha):
    """How many patterns pass before adjustment, after the volume adjustment and the
    order test."""
    def n(col):
        return int((table[col] <= alpha).sum()) if col in table else 0
    return {"before_adjustment": n("q_value"), "volume_adjusted": n("q_volume"),
            "order": n("q_order")}


def _by_evidence(table):
    ev = table["evidence"].fillna("") if "evidence" in table else []
    return {k: int((ev == k).sum()) for k in ("order", "presence", "volume")}


def _absence_option(quantile):
    """Absence rules of encourage detectors from ``detectors.absence_quantile`` (none =
    no absence rule)."""
    if quantile is None:
        return {"absence_after_events": None}
    return {"absence_after_events": "auto", "absence_quantile": float(quantile)}


def _evidence_option(value):
    """``[detectors] evidence``: a list of kinds, or "any" / empty for q_value alone."""
    if value is None or value == "any" or value == [] or value == ["any"]:
        return None
    return [value] if isinstance(value, str) else list(value)


def _check_evidence_options(cfg):
    """The unit and detector-evidence options, checked before any work is done."""
    unit = cfg["contrast"]["unit"]
    if unit not in ("learner", "sequence", "auto"):
        raise ParameterError(
            f"configuration: option 'contrast.unit' must be 'learner' (each learner once) or "
            f"'sequence' (session-level tests); got {unit!r}.")
    kinds = _evidence_option(cfg["detectors"]["evidence"])
    bad = [k for k in (kinds or []) if k not in ("order", "presence", "volume")]
    if bad:
        raise ParameterError(
            f"configuration: option 'detectors.evidence' lists {bad[0]!r}; use some of "
            f"order, presence, volume, or 'any' to select on q_value alone.")
