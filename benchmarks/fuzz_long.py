"""Long, time-boxed fuzz run of the loaders, encoder, detectors reader and watcher.

Runs tests/test_fuzz.py with many examples and fresh randomness (CI runs the same
tests with a few dozen fixed examples). Usage, from the repository root::

    python benchmarks/fuzz_long.py                 # 2000 examples per test, 30 min box
    python benchmarks/fuzz_long.py --examples 20000 --minutes 240

Any failure is printed by pytest with the falsifying example (hypothesis also saves
it in .hypothesis/ so a plain ``pytest tests/test_fuzz.py`` replays it). Exit status
is pytest's (0 = every example passed), or 3 when the time box ran out first.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--examples", type=int, default=2000, help="examples per test (default 2000)")
    ap.add_argument("--minutes", type=float, default=30.0, help="time box (default 30)")
    ap.add_argument("-k", default=None, help="only tests matching this pytest -k expression")
    args = ap.parse_args(argv)
    env = dict(os.environ, SEQMINE_FUZZ_EXAMPLES=str(args.examples), SEQMINE_FUZZ_RANDOM="1",
               PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    cmd = [sys.executable, "-m", "pytest", str(ROOT / "tests" / "test_fuzz.py"), "-q",
           "-p", "no:cacheprovider", "--hypothesis-show-statistics"]
    if args.k:
        cmd += ["-k", args.k]
    t0 = time.monotonic()
    try:
        rc = subprocess.run(cmd, cwd=ROOT, env=env, timeout=args.minutes * 60).returncode
    except subprocess.TimeoutExpired:
        print(f"fuzz_long: time box of {args.minutes:g} min ran out; no failure found so far")
        return 3
    print(f"fuzz_long: {args.examples} examples per test, {time.monotonic() - t0:.0f} s, "
          f"exit {rc}")
    return rc


if __name__ == "__main__":
    sys.exit(main())
