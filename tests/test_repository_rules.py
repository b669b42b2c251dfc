"""Rules for the test suite itself: sources named in the repository, no silent skips."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TESTS = sorted((ROOT / "tests").glob("*.py"))
#: Text files a user of the repository reads: the tests, the package and the docs.
READ_BY_USERS = TESTS + sorted((ROOT / "seqmine").rglob("*.py")) + sorted(
    (ROOT / "docs").glob("*.md")) + [ROOT / "README.md", ROOT / "DEVELOPERS.md"]

# Built from parts so that this file does not match itself: the developers' sheet of
# check values and their machine's shared folder, neither of which users have.
OUTSIDE_SHEET = "CHECK" + "_VALUES"
OUTSIDE = (OUTSIDE_SHEET, "/" + "work/")
OWN_SKIP = re.compile(r"importor" r"skip\(\s*[\"']seqmine")


def test_the_file_lists_are_not_empty():
    assert len(TESTS) > 20 and (ROOT / "README.md") in READ_BY_USERS


def test_check_values_name_their_source_not_an_outside_file():
    # Every check value names its published source beside it; a sheet that only the
    # developers had is no source for a user of the repository.
    bad = [(str(p.relative_to(ROOT)), word) for p in READ_BY_USERS
           for word in OUTSIDE if word in p.read_text(encoding="utf-8")]
    assert not bad, (f"{bad}: a file outside the repository; name the published source "
                     f"(author, year, table, page or example number) beside the value instead")


def test_no_skip_when_an_own_module_fails_to_import():
    # A broken import of the package must fail the suite, not skip tests silently.
    bad = [p.name for p in TESTS if OWN_SKIP.search(p.read_text(encoding="utf-8"))]
    assert not bad, f"{bad}: import seqmine modules directly instead of importorskip"


def test_the_rules_catch_what_they_look_for():
    # positive control: the patterns above match the forms they forbid
    assert OWN_SKIP.search("pytest.importor" 'skip("seqmine.mining.miner")')
    assert not OWN_SKIP.search("pytest.importor" 'skip("pyarrow")')
    assert OUTSIDE_SHEET in "# value from CHECK" + "_VALUES.md"


def test_no_merge_leftovers_in_the_source_tree():
    # backups that a merge tool leaves (x.py.orig, x.py.rej) would ship in the package
    leftovers = [str(p.relative_to(ROOT)) for d in ("seqmine", "tests", "docs", "benchmarks")
                 for p in (ROOT / d).rglob("*") if p.suffix in {".orig", ".rej"}]
    assert not leftovers, f"{leftovers}: delete these merge leftovers"
