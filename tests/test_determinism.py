"""Determinism: the same input and seed give byte-identical outputs, whatever --jobs.

``seqmine analyze`` runs three times on the same small greenhouse data (every stage
on, with a fast configuration): twice with ``--jobs 1`` and once with ``--jobs 2``.
Every output file must be byte-identical (``n_jobs`` and ``scheduler`` are left out of
summary.json).
"""

import pytest

from seqmine.cli.main import main
from seqmine.demo_data import write_greenhouse

FAST_TOML = """
[phases]
min_states = 2
max_states = 3
n_restarts = 2
n_iter = 10
[validate]
n_splits = 2
fractions = [0.5, 1.0]
n_bootstrap = 20
top_k = 5
[contrast]
n_bootstrap = 10
"""
CONTRACT = ["patterns.csv", "transitions.csv", "detectors.json", "summary.json",
            "early_prediction.csv", "report.html", "rejects.csv", "examples.json"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("det")
    d = root / "data"
    write_greenhouse(d, n_learners=36, random_state=5, events_per_learner=(15, 35))
    # a few bad rows, so the rejects path is part of the comparison
    with open(d / "events.csv", "a", encoding="utf-8") as fh:
        fh.write("L0001,not-a-time,set_light\nL0002,2026-03-02T09:00:00Z,\n")
    (d / "fast.toml").write_text(FAST_TOML)
    outs = {}
    for name, jobs in (("a", 1), ("b", 1), ("jobs2", 2)):
        out = root / name
        rc = main(["analyze", str(d / "events.csv"), "--outcomes", str(d / "outcomes.csv"),
                   "--out", str(out), "--config", str(d / "fast.toml"), "--seed", "99",
                   "--jobs", str(jobs), "-q"])
        assert rc == 0
        outs[name] = out
    return outs


def _files(folder):
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def test_the_contract_files_exist(runs):
    names = set(_files(runs["a"]))
    assert set(CONTRACT) <= names
    assert any(n.startswith("phases/") and n.endswith(".csv") for n in names)
    assert any(n.startswith("phases/") and n.endswith(".json") for n in names)


def test_same_seed_byte_identical(runs):
    a, b = _files(runs["a"]), _files(runs["b"])
    assert sorted(a) == sorted(b)
    differ = [n for n in a if a[n] != b[n]]
    assert differ == []


def test_jobs_do_not_change_outputs(runs):
    # execution settings (jobs, scheduler) are left out of summary.json, so every file,
    # summary and report included, is byte-identical across --jobs values
    a, j = _files(runs["a"]), _files(runs["jobs2"])
    assert sorted(a) == sorted(j)
    differ = [n for n in a if a[n] != j[n]]
    assert differ == []
    assert b'"n_jobs"' not in j["summary.json"]


def test_quiet_is_quiet_with_worker_processes():
    # -q silences progress bars in worker processes too (they start with their own
    # switch); checked through the parallel helper the early-prediction folds use
    from seqmine._util.parallel import parallel_map
    from seqmine._util.progress import quiet_mode
    with quiet_mode(True):
        assert parallel_map(_bar_in_worker, [1, 2], n_jobs=2) == [True, True]
    with quiet_mode(False):
        assert parallel_map(_bar_in_worker, [1, 2], n_jobs=2) == [False, False]


def _bar_in_worker(_):
    from seqmine._util.progress import is_quiet
    return is_quiet()
