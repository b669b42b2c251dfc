"""Fault corpus for output folders: never half-written, never through a link, never over
an input.

Every case checks the guarantee of docs/reliability.md ("Output folders"): after a run
that was interrupted (SIGINT or SIGTERM at every stage, SIGKILL), that found a full
disk, or that was refused, the output folder holds exactly one complete run: the
previous one, byte for byte, or the new one. No temporary folder or lock is left
beside it (after SIGKILL, the next command removes them). A second run into a folder
that is being written is refused with one line; links, inputs and files in the way
are refused before anything is read.
"""

import os
import resource
import shutil
import signal
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import pytest
from _run_helpers import analyze_argv, child, digest, leftovers, make_data, run_child
from seqmine.cli.main import main

#: The stage lines ``seqmine analyze`` prints, in order.
STAGE_LINES = ["loading", "encoding", "mining patterns", "scoring patterns", "transitions",
               "phase models", "early prediction", "detectors", "examples", "report"]
#: Stages that end long before the new folder is swapped in.
EARLY = STAGE_LINES[:STAGE_LINES.index("detectors")]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The data, a complete run with seed 1 ("old") and one with seed 2 ("new")."""
    root = tmp_path_factory.mktemp("integrity")
    data = make_data(root / "data")
    old, new = root / "old", root / "new"
    assert main(analyze_argv(data, old, "-q", "--seed", "1")) == 0
    assert main(analyze_argv(data, new, "-q", "--seed", "2")) == 0
    assert digest(old) != digest(new)
    return root, data, old, new


def _kill_at(label, sig, data, target, delay=0.0):
    """Run analyze (seed 2) into ``target``; send ``sig`` when ``label`` starts."""
    with child(analyze_argv(data, target, "--seed", "2")) as proc:
        seen = []
        for line in proc.stderr:
            seen.append(line)
            if f"seqmine: {label} ..." in line:
                time.sleep(delay)
                os.kill(proc.pid, sig)
                break
        rest = proc.stderr.read()
        rc = proc.wait(timeout=600)
    return rc, "".join(seen) + rest


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_interrupt_at_every_stage_leaves_one_complete_run(runs, sig):
    root, data, old, new = runs
    before, after = digest(old), digest(new)
    targets = {}
    for label in STAGE_LINES:
        target = root / f"kill-{sig.name}-{label.replace(' ', '_')}"
        shutil.copytree(old, target)
        targets[label] = target
    with ThreadPoolExecutor(max_workers=3) as pool:
        results = dict(zip(STAGE_LINES, pool.map(
            lambda label: _kill_at(label, sig, data, targets[label]), STAGE_LINES)))
    for label, (rc, err) in results.items():
        state = digest(targets[label])
        assert state in (before, after), (label, rc, err)  # one complete run, no mix
        assert leftovers(targets[label]) == [], (label, err)
        assert "leaked" not in err and "Traceback" not in err, (label, err)
        if label in EARLY:  # interrupted long before the swap: the previous run stays
            assert rc == 128 + sig and state == before, (label, rc, err)
        if rc != 0:
            assert rc == 128 + sig, (label, rc, err)
            word = "interrupted" if sig == signal.SIGINT else "terminated"
            assert f"seqmine: {word}" in err and "nothing half-written was left behind" in err


def test_sigkill_leaves_the_previous_run_and_the_next_command_cleans_up(runs, capsys):
    root, data, old, _ = runs
    target = root / "killed-9"
    shutil.copytree(old, target)
    rc, err = _kill_at("mining patterns", signal.SIGKILL, data, target)
    assert rc == -signal.SIGKILL
    assert digest(target) == digest(old)
    left = leftovers(target)
    assert any(".seqmine-tmp-" in n for n in left), left  # what a kill cannot clean
    assert main(["report", str(target), "-q"]) == 0
    assert leftovers(target) == []
    assert digest(target)["summary.json"]  # still a complete, recorded run


def test_worker_pools_stop_cleanly_on_sigterm(runs):
    root, data, _, _ = runs
    target = root / "pool"
    with child(analyze_argv(data, target, "--seed", "2", "--jobs", "2", "--no-phases")) as proc:
        for line in proc.stderr:
            if "seqmine: early prediction ..." in line:
                time.sleep(1.0)  # let the fold workers start
                os.kill(proc.pid, signal.SIGTERM)
                break
        err = proc.stderr.read()
        rc = proc.wait(timeout=300)
    assert rc == 128 + signal.SIGTERM, err
    assert "leaked" not in err and "Traceback" not in err, err
    deadline = time.time() + 30
    while time.time() < deadline:  # every worker of the session has exited
        try:
            os.killpg(proc.pid, 0)
        except ProcessLookupError:
            break
        time.sleep(0.2)
    else:
        pytest.fail("worker processes outlived the interrupted run")
    assert not target.exists() and leftovers(target) == []


def test_a_second_run_into_the_same_folder_is_refused(runs, capsys):
    root, data, _, new = runs
    target = root / "busy"
    shutil.copytree(runs[2], target)
    first = child(analyze_argv(data, target, "--seed", "2"))
    first.__enter__()
    seen = []
    for line in first.stderr:
        seen.append(line)
        if "seqmine: encoding ..." in line:
            break
    try:
        capsys.readouterr()
        assert main(analyze_argv(data, target, "-q")) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and f"another seqmine run (process {first.pid})" in err[0], err
        capsys.readouterr()
        assert main(["report", str(target), "-q"]) == 2  # sub-commands wait their turn too
        assert "another seqmine run" in capsys.readouterr().err
    finally:
        rest = first.stderr.read()
        rc = first.wait(timeout=600)
        first.__exit__(None, None, None)
    assert rc == 0, "".join(seen) + rest
    assert digest(target) == digest(new) and leftovers(target) == []


def _limit_file_size(limit):
    def apply():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return apply


@pytest.mark.parametrize("limit", [2_000, 60_000])
def test_full_disk_stops_with_one_line_and_keeps_the_previous_run(runs, limit):
    # RLIMIT_FSIZE makes every write past `limit` bytes fail with EFBIG, as a full disk
    # fails with ENOSPC; small limits fail on the first tables, larger ones later
    root, data, old, _ = runs
    target = root / f"disk-{limit}"
    shutil.copytree(old, target)
    rc, err = run_child(analyze_argv(data, target, "-q", "--seed", "2"),
                        preexec_fn=_limit_file_size(limit))
    lines = err.strip().splitlines()
    assert rc == 2, err
    assert len(lines) == 1 and lines[0].startswith("seqmine: error: "), err
    assert str(target) in lines[0] and "File too large" in lines[0], err
    assert "Nothing was written" in lines[0]
    assert digest(target) == digest(old) and leftovers(target) == []


# --------------------------------------------------------------- refused at once
def _refused(capsys, argv, *fragments):
    capsys.readouterr()
    t0 = time.perf_counter()
    rc = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2, err
    assert len(err) == 1 and err[0].startswith("seqmine: error: "), err
    for f in fragments:
        assert f in err[0], err
    return err[0], time.perf_counter() - t0


def test_links_are_never_written_through(runs, tmp_path, capsys):
    _, data, old, _ = runs
    victim = tmp_path / "victim.txt"
    victim.write_text("precious\n")
    link = tmp_path / "link-out"
    link.symlink_to(tmp_path / "real-out", target_is_directory=True)
    _refused(capsys, analyze_argv(data, link, "-q"), "is a symbolic link")
    assert not (tmp_path / "real-out").exists()
    # a link planted inside an earlier run folder
    target = tmp_path / "run"
    shutil.copytree(old, target)
    (target / "summary.json").unlink()
    (target / "summary.json").symlink_to(victim)
    before = digest(target)
    _refused(capsys, analyze_argv(data, target, "-q"), "summary.json is a symbolic link")
    assert victim.read_text() == "precious\n" and digest(target) == before
    (target / "report.html").unlink()
    (target / "report.html").symlink_to(victim)  # the page itself is a link
    _refused(capsys, ["report", str(target), "-q"], "report.html is a symbolic link")
    assert victim.read_text() == "precious\n"
    # a single output file that is a link
    (tmp_path / "table.csv").symlink_to(victim)
    _refused(capsys, ["contrast", str(old / "patternset"), "--out", str(tmp_path / "table.csv"),
                      "-q"], "is a symbolic link")
    assert victim.read_text() == "precious\n"


def test_inputs_are_never_overwritten(runs, tmp_path, capsys):
    _, data, old, _ = runs
    own = tmp_path / "data"
    shutil.copytree(data, own)
    before = digest(own)
    # --out = the folder of the inputs (a colliding name would replace the events)
    _refused(capsys, analyze_argv(own, own, "-q"), "holds the input")
    # an output file that is the command's own input
    table = tmp_path / "patterns.csv"
    shutil.copy(old / "patterns.csv", table)
    _refused(capsys, ["detectors", str(table), "--sequences", str(old / "sequences"), "--out",
                      str(table), "-q"], "is the input")
    assert digest(own) == before


@pytest.mark.parametrize("case", ["empty", "file", "below a file", "foreign files"])
def test_unusable_out_paths_are_refused_before_loading(runs, tmp_path, capsys, case):
    _, data, _, _ = runs
    (tmp_path / "plain.txt").write_text("x")
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("mine")
    out, fragment = {
        "empty": ("", "--out is empty"),
        "file": (tmp_path / "plain.txt", "is a file, not a folder"),
        "below a file": (tmp_path / "plain.txt" / "out", "is a file, so nothing can be written"),
        "foreign files": (tmp_path / "mine", "holds files seqmine did not write (notes.txt)"),
    }[case]
    line, seconds = _refused(capsys, analyze_argv(data, out, "-q"), fragment)
    assert (tmp_path / "mine" / "notes.txt").read_text() == "mine"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mine", "plain.txt"]


@pytest.mark.skipif(os.geteuid() == 0, reason="permissions do not bind root")
def test_read_only_parent_is_refused_before_loading(runs, tmp_path, capsys):
    _, data, _, _ = runs
    parent = tmp_path / "ro"
    parent.mkdir()
    parent.chmod(0o500)
    try:
        _refused(capsys, analyze_argv(data, parent / "out", "-q"), "no permission")
    finally:
        parent.chmod(0o700)


def test_rerun_replaces_the_whole_folder(runs, tmp_path, capsys):
    # files of the earlier run that the new one does not write are gone
    _, data, old, _ = runs
    target = tmp_path / "run"
    shutil.copytree(old, target)
    assert main(analyze_argv(data, target, "-q", "--seed", "1", "--no-phases",
                             "--no-validate")) == 0
    names = set(os.listdir(target))
    assert "phases" not in names and "early_prediction.csv" not in names
    assert leftovers(target) == []


def test_events_from_standard_input_and_outcomes_from_a_named_pipe(runs, tmp_path):
    _, data, _, new = runs
    fifo = tmp_path / "outcomes.pipe"
    os.mkfifo(fifo)
    writer = threading.Thread(target=lambda: fifo.write_bytes(
        (data / "outcomes.csv").read_bytes()))
    writer.start()
    out = tmp_path / "out"
    with open(data / "events.csv", "rb") as stdin:
        rc, err = run_child(["analyze", "-", "--outcomes", fifo, "--out", out, "--config",
                             data / "fast.toml", "--seed", "2", "-q"], stdin=stdin)
    writer.join(timeout=60)
    assert rc == 0, err
    import json
    rec = json.loads((out / "summary.json").read_text())["stages"]["load"]["inputs"]
    assert rec["events"]["path"] == "-" and rec["outcomes"]["path"] == str(fifo)
    assert rec["events"]["sha256"] == digest(data)["events.csv"]
    for name in ("patterns.csv", "transitions.csv", "detectors.json"):
        assert digest(out)[name] == digest(new)[name]


def test_an_empty_pipe_gets_a_message(tmp_path):
    out = tmp_path / "out"
    with open(os.devnull, "rb") as nothing:
        rc, err = run_child(["encode", "-", "--outcomes", "-", "--out", out, "-q"],
                            stdin=nothing)
    assert rc == 2 and "standard input" in err and len(err.strip().splitlines()) == 1, err
    assert not out.exists()


def test_jobs_above_the_cores_are_capped_with_a_notice(runs, tmp_path, capsys):
    from seqmine._util.parallel import available_cores
    _, data, _, _ = runs
    capsys.readouterr()
    assert main(analyze_argv(data, tmp_path / "o", "--jobs", "64", "--no-phases",
                             "--no-validate")) == 0
    err = capsys.readouterr().err
    assert (f"64 jobs asked for, but only {available_cores()} core(s) are available; "
            f"using {available_cores()}") in err


def test_files_reach_the_disk_before_the_swap(tmp_path, monkeypatch):
    # Durability: every staged file and folder is flushed before the folder is swapped
    # in, and the parent folder (which holds the renames) after it.
    from seqmine._util import outdir

    events = []
    real_sync, real_swap = outdir._sync, outdir._swap_names
    monkeypatch.setattr(outdir, "_sync", lambda p: (events.append(("sync", str(p))),
                                                   real_sync(p)))
    monkeypatch.setattr(outdir, "_swap_names", lambda a, b: (events.append(("swap", "")),
                                                           real_swap(a, b)))
    target = tmp_path / "run"
    with outdir.writing_folder(target) as st:
        (st.path / "sub").mkdir()
        (st.path / "a.csv").write_text("x\n")
        (st.path / "sub" / "b.json").write_text("{}")
        staged = str(st.path)
    swap = events.index(("swap", ""))
    before = {p for kind, p in events[:swap]}
    assert {f"{staged}/a.csv", f"{staged}/sub/b.json", f"{staged}/sub", staged} <= before
    assert ("sync", str(tmp_path)) in events[swap:]
    assert (target / "sub" / "b.json").read_text() == "{}"
