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
           "LOPSIDED_RATIO", "contrast_unit"]

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
    """Replace learner identifiers in the loaded events and outcomes by keyed hashes.

    Done right after loading, so no later stage or output ever sees a raw identifier.
    """
    from .inputs.privacy import pseudonymize_frame
    loaded.events = pseudonymize_frame(loaded.events, key).sort_values(
        ["learner", "time"], kind="mergesort").reset_index(drop=True)
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
    same settings the files are byte-identical.

    With ``config["n_jobs"] > 1`` mining partitions, Westfall-Young permutation
    batches, phase-model fits and validation folds run in local processes; with
    ``config["scheduler"]`` (a Dask address or ``"local"``) on a Dask cluster,
    connected once for the whole run. The outputs are identical to a serial run.

    Parameters
    ----------
    events_path, outcomes_path : str or Path
    out_dir : str or Path
        Created if missing; the contract files in it are replaced.
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
    from ._util.parallel import using_scheduler

    cfg = _settings(config)
    log = WarningLog()
    # quiet=False leaves the caller's setting (the command line's --quiet) in force
    with (quiet_mode(True) if quiet else contextlib.nullcontext()), \
            using_scheduler(cfg.get("scheduler"), int(cfg["n_jobs"])), collect_warnings(log):
        return _analyze(events_path, outcomes_path, out_dir, cfg, log=log)


def _settings(config):
    """The configuration of a run: defaults, a TOML file, or a (partial) dict over them."""
    from .config import default_config, load_config, merge_config
    if config is None:
        return default_config()
    if isinstance(config, (str, os.PathLike)):
        return load_config(config)
    return merge_config(default_config(), config, source="analyze(config=...)")


def _analyze(events_path, outcomes_path, out_dir, cfg, *, log):
    from .encoding.encoder import encoder_from_settings
    from .inputs.load import load_events
    from .inputs.outcomes import load_outcomes
    from .inputs.privacy import read_key
    from .mining.miner import mine, save_patternset
    from .mining.partitions import mine_parallel
    from .reporting.render import render_report, write_examples
    from .scoring.activity import activity_comparison
    from .scoring.contrast import contrast
    from .scoring.transitions import transitions

    _check_evidence_options(cfg)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = []
    ev_cfg, oc_cfg, en_cfg = cfg["events"], cfg["outcomes"], cfg["encode"]

    # 1. load and validate
    t_load = time.perf_counter()
    columns = {role: ev_cfg[f"{role}_column"] for role in
               ("learner", "time", "action", "session", "target", "channel")}
    loaded = load_events(events_path, columns=columns, format=ev_cfg["format"],
                         delimiter=ev_cfg["delimiter"], encoding=ev_cfg["encoding"],
                         duplicates=ev_cfg["duplicates"], max_bytes=ev_cfg["max_bytes"],
                         time_unit=ev_cfg["time_unit"], timezone=ev_cfg["timezone"],
                         decimal_comma=ev_cfg["decimal_comma"])
    outcomes = load_outcomes(outcomes_path, columns={
        k: oc_cfg[f"{k}_column"] for k in ("learner", "pre", "post", "max", "score", "label")},
        max_score=oc_cfg["max_score"], decimal_comma=ev_cfg["decimal_comma"])
    key_path = cfg["privacy"]["pseudonymize_key"]
    loaded, outcomes = reconcile_inputs(loaded, outcomes, match_ids=oc_cfg["match_ids"],
                                        key=read_key(key_path) if key_path else None)

    # 2. group and encode
    rule = oc_cfg["grouping"] or ("label" if outcomes.attrs.get("outcome_kind") == "label"
                                  else "median")
    grouping = Grouping(rule, fraction=oc_cfg["fraction"], low=oc_cfg["low"], high=oc_cfg["high"])
    encoder = encoder_from_settings(en_cfg)
    prepared = prepare_sequences(loaded, outcomes, encoder=encoder, grouping=grouping)
    db = prepared.db
    write_csv(loaded.rejects, out / "rejects.csv")
    files.append(out / "rejects.csv")

    db.save(out / "sequences")
    summary = dict(prepared.summary)
    seed = int(cfg["seed"])
    jobs = int(cfg["n_jobs"])
    scheduler = cfg.get("scheduler") or None
    stages = _Stages()
    stages.seconds["loading and encoding"] = round(time.perf_counter() - t_load, 3)

    # 3. mine and score
    mine_cfg, con_cfg = cfg["mine"], cfg["contrast"]
    with stages("mining patterns"):
        patternset = mine_parallel(db, n_jobs=jobs, scheduler=scheduler,
                          min_support=mine_cfg["min_support"],
                          min_length=mine_cfg["min_length"], max_length=mine_cfg["max_length"],
                          max_gap=mine_cfg["max_gap"], max_window=mine_cfg["max_window"],
                          skip_pauses=mine_cfg["skip_pauses"],
                          start_with_action=mine_cfg["start_with_action"],
                          end_with_action=mine_cfg["end_with_action"], closed=mine_cfg["closed"],
                          maximal=mine_cfg["maximal"], max_patterns=mine_cfg["max_patterns"])
        save_patternset(patternset, out / "patternset")
    unit = contrast_unit(con_cfg["unit"], db)
    contrast_options = dict(
        correction=con_cfg["correction"], alpha=con_cfg["alpha"],
        n_permutations=con_cfg["n_permutations"], random_state=seed,
        n_bootstrap=con_cfg["n_bootstrap"],
        n_replication_splits=con_cfg["n_replication_splits"],
        n_volume_strata=con_cfg["n_volume_strata"], unit=unit, n_jobs=jobs,
        scheduler=scheduler)
    with stages("scoring patterns"):
        table = contrast(patternset, db, redundancy=con_cfg["redundancy"],
                         **contrast_options)
        table = _order_patterns(table)
        write_csv(table, out / "patterns.csv")
        files.append(out / "patterns.csv")
    with stages("transitions"):
        trans = transitions(db, exclude_pauses=cfg["transitions"]["exclude_pauses"])
        write_csv(trans, out / "transitions.csv")
        files.append(out / "transitions.csv")
    with stages("scoring single tokens"):
        # what each group does more of: every action and pause kind, scored whatever
        # min_length is, in a family of its own
        singles = mine(db, min_support=1, min_length=1, max_length=1,
                       start_with_action=False, end_with_action=False)
        tokens = contrast(singles, db, redundancy=None,
                          **dict(contrast_options, n_bootstrap=0))
        tokens.insert(2, "kind", np.where(
            tokens["pattern"].map(dict(zip(db.vocab, db.is_pause))), "pause", "action"))
        tokens = _order_patterns(tokens)
        write_csv(tokens, out / "tokens.csv")
        files.append(out / "tokens.csv")
    alpha = float(con_cfg["alpha"])
    significant = table[table["q_value"] <= alpha]
    summary.update({
        "patterns_mined": int(patternset.n_patterns),
        "patterns_significant": int(len(significant)),
        "patterns_significant_distinct": int((significant["redundant_of"].fillna("") == "").sum())
        if "redundant_of" in significant else int(len(significant)),
        "patterns_surviving": _surviving(table, alpha),
        "patterns_by_evidence": _by_evidence(table),
        "tokens_by_evidence": _by_evidence(tokens),
        "unit_of_analysis": table.attrs.get("unit", "sequence"),
        "activity": activity_comparison(db),
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
            "n_replication_splits": int(con_cfg["n_replication_splits"]),
            "min_support": mine_cfg["min_support"], "max_length": mine_cfg["max_length"],
            "max_gap": mine_cfg["max_gap"], "n_splits": cfg["validate"]["n_splits"],
            "n_repeats": cfg["validate"]["n_repeats"],
            "n_repeats_hmm": cfg["validate"]["n_repeats_hmm"],
        },
        "sequence_lengths": {name: _describe(db.lengths[db.groups == g].astype(float))
                             for g, name in enumerate(db.group_names)},
    })

    # 4. phases of work
    ph_cfg = cfg["phases"]
    phases = validation = None
    if ph_cfg["enabled"]:
        from .phases import fit_phases
        with stages("phase models"):
            phase_db = _sample_sequences(db, ph_cfg.get("max_sequences"), seed)
            phases = fit_phases(phase_db,
                                n_states=range(ph_cfg["min_states"], ph_cfg["max_states"] + 1),
                                n_restarts=ph_cfg["n_restarts"], random_state=seed,
                                n_jobs=-1 if scheduler else jobs,
                                n_iter=ph_cfg["n_iter"], criterion=ph_cfg["criterion"],
                                n_splits=ph_cfg["n_splits"],
                                n_permutations=ph_cfg["n_permutations"])
            phases.save(out / "phases")
            files.append(out / "phases")
            summary["phases"] = {"n_states": int(phases.n_states),
                                 "sequences_sampled": int(phase_db.n_sequences)}

    # 5. early prediction: the whole discovery pipeline re-run inside learner folds
    va_cfg = cfg["validate"]
    if va_cfg["enabled"]:
        from sklearn.base import clone

        from .validation.crossval import default_featurizers, validate
        from .validation.features import HMMLikelihoodFeaturizer
        allowed = set(HMMLikelihoodFeaturizer().get_params()) - {"random_state"}
        unknown = sorted(set(va_cfg.get("hmm") or {}) - allowed)
        if unknown:
            raise ParameterError(
                f"configuration: unknown option 'validate.hmm.{unknown[0]}'; the options are "
                f"{', '.join(sorted(allowed))}.")
        pattern_params = {k: mine_cfg[k] for k in (
            "min_support", "min_length", "max_length", "max_gap", "max_window", "skip_pauses",
            "start_with_action", "end_with_action", "max_patterns")}
        pattern_params.update(correction="bh" if con_cfg["correction"] == "westfall-young"
                              else con_cfg["correction"], alpha=alpha,
                              top_k=int(va_cfg["top_k"]))
        with stages("early prediction"):
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
            digest = validation.summary()
            summary["early_prediction"] = {k: digest[k] for k in (
                "earliest_fraction", "earliest_fraction_sustained", "beats_baseline")
                if k in digest}
            summary["early_prediction"].update(
                learners_sampled=int(va_events["learner"].nunique()),
                learners_scored=int(validation.settings["n_learners"]),
                n_splits=int(va_cfg["n_splits"]),
                n_repeats=int(validation.settings["n_repeats"]),
                n_repeats_hmm=int(validation.settings["n_repeats_hmm"]),
                groups_fixed_once=True)

    # 6. detectors
    de_cfg = cfg["detectors"]
    with stages("detectors"):
        from .detection.detectors import export_detectors, save_detectors
        doc = export_detectors(table, db, patternset.constraints, max_q=float(de_cfg["max_q"]),
                               min_effect=float(de_cfg["min_effect"]), effect=de_cfg["effect"],
                               min_stability=float(de_cfg["min_stability"]),
                               max_detectors=de_cfg["max_detectors"],
                               evidence=_evidence_option(de_cfg["evidence"]),
                               encourage_share=de_cfg["encourage_share"],
                               absence_quantile=float(de_cfg["absence_quantile"]),
                               absence_after_events="auto" if de_cfg["absence_quantile"]
                               else None,
                               examples=bool(de_cfg["examples"]), random_state=seed)
        save_detectors(doc, out / "detectors.json")
        files.append(out / "detectors.json")
        summary["detectors"] = len(doc.get("detectors", []))
        summary["detectors_by_direction"] = {
            d: sum(x["direction"] == d for x in doc.get("detectors", []))
            for d in ("encourage", "discourage")}

    # 7. examples and report
    if cfg["report"]["examples"]:
        c = patternset.constraints
        files.append(write_examples(
            out, db, table, max_patterns=int(cfg["report"]["max_patterns"]), alpha=alpha,
            max_gap=c.get("max_gap"), max_window=c.get("max_window"),
            skip_pauses=bool(c.get("skip_pauses", False)), random_state=seed))
    summary["seed"] = seed
    # execution settings change where the work runs, never the results: they are left
    # out so that summary.json is identical whatever --jobs / --scheduler was used
    summary["configuration"] = {k: v for k, v in cfg.items() if k not in _EXECUTION_KEYS}
    summary["versions"] = _versions()
    summary["pseudonymized"] = bool(key_path)
    summary["stage_seconds"] = stages.seconds
    summary["warnings"] = log.as_list()
    write_json(out / "summary.json", _without_timings(summary))
    files.append(out / "summary.json")
    with stages("report"):
        report = render_report(out, examples=bool(cfg["report"]["examples"]),
                               max_patterns=int(cfg["report"]["max_patterns"]),
                               explorer_rows=int(cfg["report"]["explorer_rows"]))
        files.append(report)
    return AnalysisResult(
        out_dir=out, summary=summary, files=files, patterns=table, tokens=tokens,
        transitions=trans,
        phases=phases, early_prediction=None if validation is None else validation.metrics,
        detectors=pd.DataFrame(doc.get("detectors", [])), rejects=loaded.rejects,
        warnings=warnings_frame(log))


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


def _without_timings(summary):
    """summary.json stays byte-identical across runs: wall-clock times are left out."""
    return {k: v for k, v in summary.items() if k != "stage_seconds"}


def _order_patterns(table):
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


class _Stages:
    """Times each stage and shows which one runs (to stderr, unless quiet)."""

    def __init__(self):
        self.seconds = {}

    @contextlib.contextmanager
    def __call__(self, name):
        stage_line(f"{name} ...")
        t0 = time.perf_counter()
        yield
        self.seconds[name] = round(time.perf_counter() - t0, 3)
