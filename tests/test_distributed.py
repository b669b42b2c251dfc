"""Scale-out: on a local Dask cluster (2 worker processes) every parallel stage equals the serial run.

One cluster is started for the whole module. Skipped when the optional
``distributed`` package is missing (``pip install "seqmine[distributed]"``).
"""

import numpy as np
import pandas as pd
import pytest

# The cluster's own sockets are sometimes closed late (at interpreter shutdown of a
# worker); that is Dask's housekeeping, not ours, so its resource warnings are not errors.
pytestmark = [pytest.mark.filterwarnings("ignore::ResourceWarning"),
              pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")]

distributed = pytest.importorskip(
    "distributed", reason="the Dask tests need the optional 'distributed' package "
                          "(pip install \"seqmine[distributed]\")")

from _parallel_helpers import _random_db, assert_same_patternset  # noqa: E402
from _validate_toys import planted_data  # noqa: E402

from seqmine._util.parallel import parallel_map, using_scheduler  # noqa: E402
from seqmine.mining.miner import mine  # noqa: E402
from seqmine.mining.partitions import mine_parallel  # noqa: E402
from seqmine.scoring.contrast import contrast  # noqa: E402


@pytest.fixture(scope="module")
def scheduler():
    """Address of a local cluster: 2 worker processes, 1 thread each, no dashboard."""
    try:
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                           memory_limit="1GiB", dashboard_address=None)
    except Exception as exc:  # pragma: no cover - e.g. no free ports in a sandbox
        pytest.skip(f"a local Dask cluster could not start here: {exc}")
    with cluster:
        yield cluster.scheduler_address


def test_tasks_run_on_the_two_workers_in_order(scheduler):
    with distributed.Client(scheduler) as client:
        assert len(client.scheduler_info()["workers"]) == 2
    assert parallel_map(abs, [-3, 1, -2, 5], scheduler=scheduler) == [3, 1, 2, 5]


@pytest.mark.parametrize("kw", [
    dict(min_support=0.1, max_length=4, skip_pauses=True),
    dict(min_support=0.15, min_length=2, max_length=5, max_gap=1, closed=True,
         start_with_action=True, end_with_action=True),
    dict(min_support=3, max_length=4, max_window=5, maximal=True),
])
def test_mining_on_the_cluster_equals_serial(scheduler, kw):
    db = _random_db(np.random.default_rng(21), n_seq=150, n_sym=6)
    assert_same_patternset(mine_parallel(db, scheduler=scheduler, n_jobs=2, **kw),
                           mine(db, **kw))


def test_westfall_young_on_the_cluster_equals_serial(scheduler):
    db = _random_db(np.random.default_rng(9), n_seq=90, n_sym=5)
    ps = mine(db, min_support=0.1, max_length=3)
    kw = dict(correction="westfall-young", n_permutations=150, random_state=5, n_bootstrap=5,
              batch_size=20)
    serial = contrast(ps, db, **kw)
    on_dask = contrast(ps, db, scheduler=scheduler, n_jobs=2, **kw)
    pd.testing.assert_frame_equal(serial, on_dask)
    assert (serial["q_value"] < 1).any()   # the permutations did decide something


def test_validation_folds_on_the_cluster_equal_serial(scheduler):
    from seqmine.encoding.encoder import Encoder
    from seqmine.inputs.outcomes import Grouping
    from seqmine.validation.crossval import default_featurizers, validate

    ev, oc = planted_data(30, seed=4)
    kw = dict(n_splits=3, fractions=[0.5, 1.0], n_bootstrap=50, grouping=Grouping(),
              encoder=Encoder(), classifiers=["frequency_pause"],
              featurizers={"frequency_pause": default_featurizers()["frequency_pause"]})
    serial = validate(ev, oc, **kw)
    on_dask = validate(ev, oc, n_jobs=2, scheduler=scheduler, **kw)
    pd.testing.assert_frame_equal(serial.to_frame(), on_dask.to_frame())
    pd.testing.assert_frame_equal(serial.predictions, on_dask.predictions)


def test_phase_restarts_on_the_cluster_equal_serial(scheduler):
    from seqmine.phases import fit_phase_model

    db = _random_db(np.random.default_rng(2), n_seq=20, n_sym=4)
    with using_scheduler(scheduler, n_jobs=2) as client:
        assert client is not None
        on_dask = fit_phase_model(db, n_states=2, n_restarts=3, random_state=2, n_jobs=-1, n_iter=20)
    assert on_dask.equals(fit_phase_model(db, n_states=2, n_restarts=3, random_state=2, n_iter=20))


def test_one_connection_serves_every_call_inside_using_scheduler(scheduler, monkeypatch):
    import seqmine._util.parallel as par
    opened = []
    real = par._connect
    monkeypatch.setattr(par, "_connect", lambda *a: opened.append(1) or real(*a))
    with using_scheduler(scheduler):
        assert parallel_map(abs, [-1, -2], scheduler=scheduler) == [1, 2]
        assert parallel_map(abs, [-3], scheduler=scheduler) == [3]
    assert len(opened) == 1


@pytest.mark.slow
def test_analyze_on_the_cluster_writes_the_serial_outputs(scheduler, tmp_path):

    from seqmine.config import default_config, merge_config
    from seqmine.demo_data import write_greenhouse
    from seqmine.pipeline import analyze

    write_greenhouse(tmp_path / "data", 60, random_state=3)
    base = {"contrast": {"correction": "westfall-young", "n_permutations": 60,
                         "n_bootstrap": 10},
            "phases": {"min_states": 2, "max_states": 2, "n_restarts": 2, "n_iter": 10},
            "validate": {"n_splits": 2, "fractions": [1.0], "n_bootstrap": 20}}
    ev, oc = tmp_path / "data" / "events.csv", tmp_path / "data" / "outcomes.csv"
    analyze(ev, oc, tmp_path / "serial", merge_config(default_config(), base), quiet=True)
    analyze(ev, oc, tmp_path / "dask", merge_config(default_config(), dict(
        base, n_jobs=2, scheduler=scheduler)), quiet=True)
    for name in ("patterns.csv", "transitions.csv", "early_prediction.csv", "detectors.json",
                 "examples.json"):
        assert (tmp_path / "serial" / name).read_bytes() == (tmp_path / "dask" / name).read_bytes()
    phase_files = sorted(p.relative_to(tmp_path / "serial") for p in
                         (tmp_path / "serial" / "phases").rglob("*") if p.is_file())
    assert len(phase_files) > 3
    for name in phase_files:
        assert (tmp_path / "serial" / name).read_bytes() == (tmp_path / "dask" / name).read_bytes()
    # execution settings stay out of summary.json, so it is identical as well
    assert ((tmp_path / "serial" / "summary.json").read_bytes()
            == (tmp_path / "dask" / "summary.json").read_bytes())
