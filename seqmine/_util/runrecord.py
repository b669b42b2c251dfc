"""The run record in ``summary.json``: which stages wrote which files, how and from what.

An output folder holds one run. Its ``summary.json`` carries the record (layout in
``docs/outputs.md``): ``history`` (one entry per command that wrote the folder) and
``stages`` (stage name -> status, step, command, settings, inputs, outputs with their
SHA-256). A sub-command that re-runs a stage in the folder marks the stages that
depend on it ``removed`` (their files are deleted and the summary keys they own
dropped), so the folder never describes two different runs.
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
from pathlib import Path

__all__ = ["RunRecord", "STAGES", "DEPENDS", "RECORD_VERSION", "file_input", "sha256_file",
           "snapshot", "new_files", "dependents", "read_summary", "has_record",
           "output_status"]

#: Layout version of the record.
RECORD_VERSION = 1

#: Stage names, in pipeline order.
STAGES = ("load", "encode", "mine", "contrast", "transitions", "phases", "validate",
          "detectors", "examples", "report")

#: Stages each stage reads the results of (directly).
DEPENDS = {
    "load": (),
    "encode": ("load",),
    "mine": ("encode",),
    "contrast": ("mine", "encode"),
    "transitions": ("encode",),
    "phases": ("encode",),
    "validate": ("encode",),
    "detectors": ("contrast", "mine", "encode"),
    "examples": ("contrast", "encode"),
    "report": tuple(s for s in STAGES if s != "report"),
}

#: Commands that re-run each stage (for the messages of removed stages).
_RERUN = {"load": "seqmine encode", "encode": "seqmine encode", "mine": "seqmine mine DIR",
          "contrast": "seqmine contrast DIR", "transitions": "seqmine analyze",
          "phases": "seqmine phases DIR", "validate": "seqmine validate EVENTS --out DIR",
          "detectors": "seqmine detectors DIR", "examples": "seqmine analyze",
          "report": "seqmine report DIR"}


def dependents(stage):
    """Every stage that depends on ``stage``, directly or through others, in order.

    Examples
    --------
    >>> dependents("contrast")
    ['detectors', 'examples', 'report']
    """
    out = set()
    frontier = {stage}
    while frontier:
        frontier = {s for s, deps in DEPENDS.items() if set(deps) & frontier} - out
        out |= frontier
    return [s for s in STAGES if s in out]


def sha256_file(path, chunk=1 << 20):
    """Hex SHA-256 of a file's content."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


def file_input(path, shown=None):
    """Record entry of an input file: ``{"path", "bytes", "sha256"}``.

    ``shown`` is the name recorded (``-`` for standard input read into ``path``).
    """
    p = Path(path)
    return {"path": str(shown if shown is not None else path), "bytes": p.stat().st_size,
            "sha256": sha256_file(p)}


def snapshot(folder):
    """{relative path: (device, inode, size, mtime)} of every file below ``folder``."""
    folder = Path(folder)
    out = {}
    for root, _dirs, files in os.walk(folder):
        for name in files:
            p = Path(root) / name
            st = p.stat()
            out[p.relative_to(folder).as_posix()] = (st.st_dev, st.st_ino, st.st_size,
                                                    st.st_mtime_ns)
    return out


def new_files(folder, before):
    """{relative path: SHA-256} of the files below ``folder`` that are new or changed
    since ``before`` (a :func:`snapshot`)."""
    after = snapshot(folder)
    return {rel: sha256_file(Path(folder) / rel)
            for rel, st in sorted(after.items()) if before.get(rel) != st}


def read_summary(folder):
    """The ``summary.json`` of ``folder`` as a dict, or None when absent or unreadable."""
    path = Path(folder) / "summary.json"
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def has_record(summary):
    """True when ``summary`` (a dict) carries a run record."""
    return isinstance(summary, dict) and isinstance(summary.get("stages"), dict)


def output_status(summary, folder, path, stage):
    """How the report may use the output ``path`` (relative) of ``stage``.

    Returns ``(usable, note)``: without a record every existing file is usable; with
    one, only files the record lists as outputs of a ``done`` stage are, and the note
    says why not (skipped, removed, not part of the run) or that the content changed
    after the run.
    """
    exists = (Path(folder) / path).exists()
    if not has_record(summary):
        return exists, None if exists else f"{path} not found"
    entry = summary["stages"].get(stage)
    if not isinstance(entry, dict):
        return False, f"{path}: the {stage} stage did not run for this folder"
    status = entry.get("status")
    if status != "done":
        why = entry.get("reason") or status
        return False, f"{stage} {status or 'not run'}: {why}"
    outputs = entry.get("outputs") or {}
    mine = {k: v for k, v in outputs.items() if k == path or k.startswith(path.rstrip("/") + "/")}
    if not mine:
        return False, f"{path} is not among the files the {stage} stage wrote"
    missing = [k for k in mine if not (Path(folder) / k).is_file()]
    if missing:
        return False, f"{missing[0]} is missing although the run record lists it"
    if path in mine and sha256_file(Path(folder) / path) != mine[path]:
        return True, f"{path} was changed after the run (its content differs from the record)"
    return True, None


class RunRecord:
    """The record of one command writing an output folder.

    Parameters
    ----------
    command : str
        The command writing now (``analyze``, ``contrast`` ...).
    previous : dict, optional
        The folder's current summary (update mode): its stages and history are kept.

    Examples
    --------
    >>> rec = RunRecord("analyze")
    >>> rec.done("load", settings={"format": "csv"}, outputs={"rejects.csv": "ab12"})
    >>> s = rec.apply({"rows_in": 3})
    >>> s["history"], s["stages"]["load"]["status"]
    ([{'step': 1, 'command': 'analyze', 'ran': ['load'], 'skipped': [], 'removed': []}], 'done')
    """

    def __init__(self, command, previous=None):
        previous = previous if has_record(previous) else {}
        self.command = command
        self.stages = copy.deepcopy(previous.get("stages") or {})
        self.history = copy.deepcopy(previous.get("history") or [])
        self.step = len(self.history) + 1
        self.ran, self.skipped, self.removed = [], [], []
        self._drop_keys = []

    # ------------------------------------------------------------- changes
    def done(self, stage, *, settings=None, inputs=None, outputs=None, summary_keys=()):
        """Record that ``stage`` ran now and wrote ``outputs`` ({path: sha256})."""
        self._entry(stage, "done", settings=settings, inputs=inputs, outputs=outputs,
                    summary_keys=sorted(summary_keys))
        self.ran.append(stage)

    def skip(self, stage, reason, settings=None):
        """Record that ``stage`` was not run now, and why."""
        self._forget_keys(stage)
        self._entry(stage, "skipped", reason=reason, settings=settings)
        self.skipped.append(stage)

    def rerun(self, stage):
        """Prepare re-running ``stage`` in an existing folder.

        Returns the relative paths to delete: the stage's previous outputs and those of
        every stage depending on it, which are marked ``removed``.
        """
        paths = list((self.stages.get(stage) or {}).get("outputs") or {})
        self._forget_keys(stage)
        for dep in dependents(stage):
            entry = self.stages.get(dep)
            if not entry or entry.get("status") != "done":
                continue
            paths += list(entry.get("outputs") or {})
            self._forget_keys(dep)
            self._entry(dep, "removed", settings=entry.get("settings"), reason=(
                f"{stage} was re-run by 'seqmine {self.command}'; run '{_RERUN[dep]}' to "
                f"write it again"))
            self.removed.append(dep)
        return paths

    def status(self, stage):
        """``done``, ``skipped``, ``removed`` or None (never recorded)."""
        return (self.stages.get(stage) or {}).get("status")

    def outputs(self, stage):
        """{relative path: sha256} of a stage's recorded outputs."""
        return dict((self.stages.get(stage) or {}).get("outputs") or {})

    def settings(self, stage):
        """The recorded settings of ``stage`` (a copy; empty when absent)."""
        return copy.deepcopy((self.stages.get(stage) or {}).get("settings") or {})

    # -------------------------------------------------------------- output
    def apply(self, summary):
        """``summary`` with this record written into it (a new dict).

        Summary keys owned by removed or re-run stages are dropped (dotted keys name
        entries of nested objects, such as ``method.correction``).
        """
        out = copy.deepcopy(summary)
        fresh = {k for s in self.ran for k in self.stages[s].get("summary_keys") or ()}
        for key in self._drop_keys:
            if key not in fresh:
                _drop(out, key)
        history = self.history + [{"step": self.step, "command": self.command,
                                   "ran": list(self.ran), "skipped": list(self.skipped),
                                   "removed": list(self.removed)}]
        out["record_version"] = RECORD_VERSION
        out["history"] = history
        out["stages"] = {s: self.stages[s] for s in STAGES if s in self.stages}
        return out

    # ------------------------------------------------------------ internals
    def _entry(self, stage, status, *, settings=None, inputs=None, outputs=None, reason=None,
               summary_keys=()):
        if stage not in STAGES:
            raise ValueError(f"unknown stage {stage!r}")
        entry = {"status": status, "step": self.step, "command": self.command,
                 "settings": copy.deepcopy(settings or {}), "inputs": dict(inputs or {}),
                 "outputs": dict(sorted((outputs or {}).items()))}
        if reason:
            entry["reason"] = reason
        if summary_keys:
            entry["summary_keys"] = list(summary_keys)
        self.stages[stage] = entry

    def _forget_keys(self, stage):
        self._drop_keys += list((self.stages.get(stage) or {}).get("summary_keys") or [])


def _drop(data, dotted):
    *parents, last = dotted.split(".")
    for p in parents:
        data = data.get(p) if isinstance(data, dict) else None
        if data is None:
            return
    if isinstance(data, dict):
        data.pop(last, None)
