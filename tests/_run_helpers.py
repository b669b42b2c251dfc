"""Shared helpers for the output-integrity tests: a small greenhouse data set, a fast
configuration, folder digests and a way to run seqmine in a child process."""

import hashlib
import os
import subprocess
import sys
from pathlib import Path

from seqmine.demo_data import write_greenhouse

#: A configuration that runs every stage in about a second of CPU on 30 learners.
FAST_TOML = """
[phases]
min_states = 2
max_states = 2
n_restarts = 1
n_iter = 5
n_permutations = 2
[validate]
n_splits = 2
fractions = [0.5, 1.0]
n_bootstrap = 10
top_k = 5
[contrast]
n_bootstrap = 5
[mine]
min_support = 0.3
max_length = 3
"""


def make_data(folder, n_learners=30, seed=5):
    """events.csv, outcomes.csv and fast.toml in ``folder``; returns the folder."""
    folder = Path(folder)
    write_greenhouse(folder, n_learners=n_learners, random_state=seed,
                     events_per_learner=(15, 30))
    (folder / "fast.toml").write_text(FAST_TOML)
    return folder


def analyze_argv(data, out, *extra):
    return ["analyze", str(data / "events.csv"), "--outcomes", str(data / "outcomes.csv"),
            "--out", str(out), "--config", str(data / "fast.toml"), *map(str, extra)]


def digest(folder):
    """{relative path: sha256} of every file below ``folder`` (None if it is missing)."""
    folder = Path(folder)
    if not folder.is_dir():
        return None
    out = {}
    for root, _dirs, files in os.walk(folder):
        for name in files:
            p = Path(root) / name
            out[p.relative_to(folder).as_posix()] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def leftovers(folder):
    """Temporary folders, old folders and lock files seqmine left beside ``folder``."""
    folder = Path(folder)
    return sorted(p.name for p in folder.parent.iterdir()
                  if p.name.startswith(f".{folder.name}.seqmine"))


def child(argv, **kwargs):
    """Start ``seqmine argv`` in a child process (its own session), stderr piped."""
    return subprocess.Popen([sys.executable, "-m", "seqmine", *map(str, argv)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, **kwargs)


def run_child(argv, timeout=600, **kwargs):
    """Run ``seqmine argv`` to the end in a child process: (exit status, stderr)."""
    proc = subprocess.run([sys.executable, "-m", "seqmine", *map(str, argv)],
                          capture_output=True, text=True, timeout=timeout, **kwargs)
    return proc.returncode, proc.stderr
