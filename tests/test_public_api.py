"""The package's public surface: every name in __all__ resolves; errors are catchable."""

import seqmine
from seqmine.errors import ColumnError, DataFileError, ParameterError, SeqmineInputError


def test_every_public_name_resolves():
    for name in seqmine.__all__:
        assert getattr(seqmine, name) is not None, name


def test_user_errors_are_value_errors():
    for cls in (DataFileError, ColumnError, ParameterError):
        assert issubclass(cls, SeqmineInputError) and issubclass(cls, ValueError)


def test_help_lists_every_stage(capsys):
    from seqmine.cli.main import main
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for cmd in ["demo", "analyze", "encode", "mine", "contrast", "phases", "validate",
                "detectors", "watch", "report"]:
        assert cmd in out, cmd
