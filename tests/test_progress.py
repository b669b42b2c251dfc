"""Progress output: bars only on a terminal, stage lines otherwise, quiet mode scoped."""

import io

from seqmine._util.progress import is_quiet, progress, quiet_mode, stage_line


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_no_bar_when_standard_error_is_not_a_terminal(monkeypatch):
    log = io.StringIO()
    monkeypatch.setattr("sys.stderr", log)
    with quiet_mode(False):
        assert list(progress(range(5), desc="mining levels")) == [0, 1, 2, 3, 4]
        bar = progress(total=3, desc="phases")
        bar.update()
        bar.close()
    assert log.getvalue() == ""  # no escape codes in a log file


def test_bar_on_a_terminal(monkeypatch):
    term = _Terminal()
    monkeypatch.setattr("sys.stderr", term)
    with quiet_mode(False):
        assert list(progress(range(3), desc="folds", leave=True)) == [0, 1, 2]
    assert "folds" in term.getvalue()


def test_quiet_silences_bars_and_stage_lines(monkeypatch):
    term = _Terminal()
    monkeypatch.setattr("sys.stderr", term)
    with quiet_mode(True):
        list(progress(range(3), desc="folds", leave=True))
        stage_line("mining patterns ...")
    assert term.getvalue() == ""
    with quiet_mode(False):
        stage_line("mining patterns ...")
    assert term.getvalue() == "seqmine: mining patterns ...\n"


def test_quiet_mode_is_restored_after_the_block():
    before = is_quiet()
    with quiet_mode(not before):
        assert is_quiet() is (not before)
        with quiet_mode(before):
            assert is_quiet() is before
        assert is_quiet() is (not before)
    assert is_quiet() is before


def test_command_line_quiet_does_not_outlive_the_call(tmp_path):
    from seqmine.cli.main import main
    before = is_quiet()
    assert main(["report", str(tmp_path / "missing"), "-q"]) == 2
    assert is_quiet() is before
