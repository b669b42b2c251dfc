"""The command line starts quickly: building the parser imports no heavy library.

Timings are measured side by side in ``benchmarks/bench_startup.py``; here we check the
cause of slow start-up directly: which modules ``seqmine --help`` pulls in.
"""

import json
import subprocess
import sys

import pytest

HEAVY = ("pandas", "scipy", "sklearn", "numpy", "matplotlib", "hmmlearn", "networkx", "tqdm")

_PROBE = """
import json, sys
from seqmine.cli.main import build_parser
parser = build_parser()
for argv in {argvs!r}:
    try:
        parser.parse_args(argv)
    except SystemExit:
        pass
print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & set({heavy!r}))))
"""


def _heavy_modules_after(argvs):
    code = _PROBE.format(argvs=argvs, heavy=HEAVY)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_help_imports_no_heavy_library():
    commands = ["demo", "analyze", "encode", "mine", "contrast", "phases", "validate",
                "detectors", "watch", "report"]
    argvs = [["--help"]] + [[c, "--help"] for c in commands]
    assert _heavy_modules_after(argvs) == []


def test_probe_sees_a_heavy_import():
    # positive control: the probe does notice a module that pulls in pandas
    code = _PROBE.format(argvs=[["--help"]], heavy=HEAVY).replace(
        "parser = build_parser()", "import seqmine.inputs.load\nparser = build_parser()")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert "pandas" in json.loads(out.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("argv", [["--help"], ["analyze", "--help"], ["watch", "--help"]])
def test_help_still_works(argv, capsys):
    from seqmine.cli.main import main
    assert main(argv) == 0
    assert "usage: seqmine" in capsys.readouterr().out
