"""Tests of the ``seqmine contrast`` command."""

import json

import numpy as np
import pandas as pd
import pytest
from _contrast_helpers import PATTERNS, brute_patternset, random_db  # noqa: E402

from seqmine._util.progress import is_quiet, quiet_mode
from seqmine.cli.commands.contrast import read_patternset
from seqmine.cli.main import main
from seqmine.mining.miner import save_patternset
from seqmine.scoring.contrast import contrast
from seqmine.scoring.transitions import TRANSITION_COLUMNS


def _write_patternset(ps, folder):
    """The pattern set folder format of 'seqmine mine'."""
    return save_patternset(ps, folder)


@pytest.fixture
def workdir(tmp_path):
    db = random_db(n=40, seed=1)
    ps = brute_patternset(db, PATTERNS)
    db.save(tmp_path / "seqdb")
    _write_patternset(ps, tmp_path / "mined")
    return tmp_path, db, ps


def test_contrast_command_writes_tables(workdir, capsys):
    tmp, db, ps = workdir
    was_quiet = is_quiet()
    with quiet_mode(False):
        _check_command_writes_tables(tmp, db, ps, capsys)
    assert is_quiet() == was_quiet


def _check_command_writes_tables(tmp, db, ps, capsys):
    rc = main(["contrast", str(tmp / "mined"), "--sequences", str(tmp / "seqdb"), "--out",
               str(tmp / "out" / "patterns.csv"), "--transitions", str(tmp / "out" / "t.csv"),
               "--correction", "westfall-young", "--permutations", "99", "--seed", "3",
               "--bootstrap", "10"])
    assert rc == 0
    assert "wrote 8 patterns" in capsys.readouterr().out
    got = pd.read_csv(tmp / "out" / "patterns.csv", keep_default_na=False)
    ref = contrast(ps, db, correction="westfall-young", n_permutations=99, random_state=3,
                   n_bootstrap=10)
    assert list(got.columns) == list(ref.columns)
    np.testing.assert_allclose(got["q_value"].astype(float), ref["q_value"])
    assert list(got["favours"]) == list(ref["favours"])
    tr = pd.read_csv(tmp / "out" / "t.csv")
    assert list(tr.columns) == TRANSITION_COLUMNS
    # same input and seed: byte-identical output
    main(["contrast", str(tmp / "mined"), "--sequences", str(tmp / "seqdb"), "-q", "--out",
          str(tmp / "again.csv"), "--correction", "westfall-young", "--permutations", "99",
          "--seed", "3", "--bootstrap", "10"])
    assert (tmp / "again.csv").read_bytes() == (tmp / "out" / "patterns.csv").read_bytes()


def test_reads_folder_or_its_csv(workdir):
    tmp, db, ps = workdir
    a = read_patternset(tmp / "mined")
    b = read_patternset(tmp / "mined" / "patterns.csv")
    assert a.names == ps.names == b.names
    assert (a.counts != ps.counts).nnz == 0


def test_user_errors_exit_2_with_one_line(workdir, capsys):
    tmp, db, ps = workdir
    rc = main(["contrast", str(tmp / "nowhere"), "--out", str(tmp / "p.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and "no such pattern set folder" in err and err.count("\n") == 1
    rc = main(["contrast", str(tmp / "mined"), "--out", str(tmp / "p.csv"), "--transitions",
               str(tmp / "t.csv")])
    assert rc == 2 and "--transitions needs --sequences" in capsys.readouterr().err
    rc = main(["contrast", str(tmp / "mined"), "--out", str(tmp / "p.csv"), "--groups",
               "strong,best"])
    assert rc == 2 and "Group 'best' of contrast is not among" in capsys.readouterr().err
    rc = main(["contrast", str(tmp / "mined"), "--out", str(tmp / "p.csv"), "--redundancy",
               "lots"])
    assert rc == 2 and "--redundancy: expected a number or 'none'" in capsys.readouterr().err
    rc = main(["contrast", str(tmp / "seqdb"), "--out", str(tmp / "p.csv")])
    assert rc == 2 and "not a pattern set folder" in capsys.readouterr().err
    rc = main(["contrast", str(tmp / "mined"), "--out", str(tmp / "p.csv"), "--pairwise",
               str(tmp / "pw.csv")])
    assert rc == 2 and "--pairwise needs more than two" in capsys.readouterr().err


def test_three_groups_pairwise_file(tmp_path):
    db = random_db(n=45, seed=2, n_groups=3)
    ps = brute_patternset(db, PATTERNS)
    db.save(tmp_path / "seqdb")
    _write_patternset(ps, tmp_path / "mined")
    rc = main(["contrast", str(tmp_path / "mined"), "--sequences", str(tmp_path / "seqdb"), "-q",
               "--out", str(tmp_path / "p.csv"), "--pairwise", str(tmp_path / "pw.csv"),
               "--bootstrap", "0"])
    assert rc == 0
    assert "chi2" in pd.read_csv(tmp_path / "p.csv").columns
    assert len(pd.read_csv(tmp_path / "pw.csv")) == 3 * len(PATTERNS)


def test_permutation_benchmark_runs_in_tiny_mode(tmp_path):
    # Smoke test so the benchmark script does not rot (timings are not checked).
    import importlib.util
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_permutation.py"
    spec = importlib.util.spec_from_file_location("bench_permutation", path)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    out = tmp_path / "perm.json"
    was_quiet = is_quiet()
    assert bench.main(["--learners", "120", "--patterns", "50", "--permutations", "20",
                       "--out", str(out)]) == 0
    assert is_quiet() == was_quiet
    result = json.loads(out.read_text())
    assert result["patterns"] == 50 and result["speedup_vs_naive"] > 0
