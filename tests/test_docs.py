"""The user documentation stays true to the code: configuration examples load, shown
command lines parse, and documented error messages still exist."""

import functools
import re
import shlex
from pathlib import Path

import pytest

import seqmine.detection.watcher
import seqmine.errors
from seqmine.cli.main import build_parser
from seqmine.config import DEFAULT_CONFIG, load_config

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
DOC_FILES = sorted(DOCS.glob("*.md")) + [ROOT / "README.md"]


def _fenced(text, lang):
    """Bodies of the fenced code blocks of one language."""
    return re.findall(rf"^```{lang}[ \t]*\n(.*?)^```", text, re.S | re.M)


def _toml_blocks():
    out = []
    for path in DOC_FILES:
        if path.is_file():
            for i, block in enumerate(_fenced(path.read_text(encoding="utf-8"), "toml")):
                out.append(pytest.param(block, id=f"{path.name}-{i}"))
    return out


def _command_lines():
    """Every ``seqmine ...`` command in the bash blocks of the docs."""
    out = []
    for path in DOC_FILES:
        if not path.is_file():
            continue
        for block in _fenced(path.read_text(encoding="utf-8"), "bash"):
            # join continuation lines, then split chained commands
            for line in block.replace("\\\n", " ").splitlines():
                for part in re.split(r"&&|\|\||;|\|", line):
                    part = part.strip()
                    if part.startswith("seqmine ") or part == "seqmine":
                        out.append(pytest.param(part, id=f"{path.name}: {part[:60]}"))
    return out


@pytest.mark.parametrize("block", _toml_blocks())
def test_toml_examples_load(block, tmp_path):
    path = tmp_path / "example.toml"
    path.write_text(block, encoding="utf-8")
    cfg = load_config(path)  # raises on unknown keys or bad TOML
    assert set(cfg) == set(DEFAULT_CONFIG)


def test_quickstart_config_lists_every_key_with_its_default(tmp_path):
    text = (DOCS / "quickstart.md").read_text(encoding="utf-8")
    blocks = _fenced(text, "toml")
    assert blocks, "quickstart.md has no TOML example"
    full = blocks[0]
    path = tmp_path / "full.toml"
    path.write_text(full, encoding="utf-8")
    # the full example repeats the defaults, so loading it changes nothing
    assert load_config(path) == DEFAULT_CONFIG
    # every key appears, set or commented out (keys whose default is "not set")
    for section, value in DEFAULT_CONFIG.items():
        if isinstance(value, dict):
            assert re.search(rf"^\[{section}\]", full, re.M), f"section [{section}] missing"
            for key in value:
                assert re.search(rf"^#?\s*{key}\s*=", full, re.M) or \
                    re.search(rf"^\[{section}\.{key}\]", full, re.M), \
                    f"key {section}.{key} missing from the quickstart example"
        else:
            assert re.search(rf"^#?\s*{section}\s*=", full, re.M), f"top-level key {section} missing"


def test_docs_show_commands():
    assert len(_command_lines()) >= 15


@pytest.mark.parametrize("line", _command_lines())
def test_command_lines_parse(line):
    argv = shlex.split(line, comments=True)[1:]
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse prints the reason
        pytest.fail(f"'{line}' does not parse (exit {exc.code})")
    assert getattr(args, "command", None), f"'{line}' names no command"


_CHECK = re.compile(r"<!--\s*check:\s*(\w+)\s*\|\s*(.*?)\s*-->")


@functools.lru_cache(maxsize=1)
def _normalized_source():
    """All seqmine source with adjacent string literals joined across lines."""
    text = "\n".join(p.read_text(encoding="utf-8")
                     for p in sorted((ROOT / "seqmine").rglob("*.py")))
    # "abc "\n    f"def" -> "abc def"  (implicit concatenation of string literals)
    return re.sub(r"""(["'])\s*\n\s*[frbFRB]{0,2}(["'])""", "", text)


def _checks():
    text = (DOCS / "troubleshooting.md").read_text(encoding="utf-8")
    return [pytest.param(cls, frag, id=f"{cls}: {frag[:50]}") for cls, frag in _CHECK.findall(text)]


def test_troubleshooting_has_checks():
    assert len(_checks()) >= 60


@pytest.mark.parametrize(("cls", "fragment"), _checks())
def test_documented_messages_exist(cls, fragment):
    assert hasattr(seqmine.errors, cls) or hasattr(seqmine.detection.watcher, cls), \
        f"{cls} is not an exception class of seqmine"
    assert fragment in _normalized_source(), \
        f"troubleshooting.md quotes {fragment!r}, which no longer appears in seqmine/"


def _anchor(heading):
    """GitHub-style anchor of a Markdown heading."""
    text = re.sub(r"[`*_]", "", heading.strip().lower())
    text = re.sub(r"[^\w\- ]", "", text)
    return text.replace(" ", "-")


#: Pages written in parallel by others; a link to them may precede the page.
_PENDING = {"reliability.md", "scaling.md"}


def test_links_between_docs_resolve():
    anchors = {p.name: {_anchor(h) for h in re.findall(r"^#+ (.*)$", p.read_text(encoding="utf-8"), re.M)}
               for p in DOCS.glob("*.md")}
    broken = []
    for path in sorted(DOCS.glob("*.md")):
        for target in re.findall(r"\]\(([^)\s]+)\)", path.read_text(encoding="utf-8")):
            if target.startswith(("http://", "https://", "mailto:")):
                continue
            name, _, frag = target.partition("#")
            name = name or path.name
            if not name.endswith(".md") and (path.parent / name).is_file():
                continue  # an image or another file beside the docs
            if name not in anchors:
                if name not in _PENDING:
                    broken.append(f"{path.name}: {target}")
                continue
            if frag and frag not in anchors[name]:
                broken.append(f"{path.name}: {target}")
    assert not broken, f"broken links: {broken}"


def test_every_reject_reason_is_documented():
    from seqmine.inputs.load import REJECT_REASONS
    text = (DOCS / "input-formats.md").read_text(encoding="utf-8")
    missing = [r for r in REJECT_REASONS if f"`{r}`" not in text]
    assert not missing, f"input-formats.md does not explain reject reasons {missing}"


def test_quickstart_covers_every_command():
    text = (DOCS / "quickstart.md").read_text(encoding="utf-8")
    sub = next(a for a in build_parser()._actions if a.dest == "command")
    missing = [name for name in sub.choices if f"seqmine {name}" not in text]
    assert not missing, f"quickstart.md shows no command line for {missing}"


def test_every_work_cited_in_methods_is_in_its_reference_list():
    text = (DOCS / "methods.md").read_text(encoding="utf-8")
    body, refs = text.split("## References", 1)
    # reference entries: "- Surname, I., [& Other, I.] (YYYY)" possibly over several lines
    entries = re.findall(r"^- (.*?)\((\d{4})[a-z]?\)", refs, flags=re.M | re.S)
    listed = {(re.split(r"[ ,]", authors.strip(), maxsplit=1)[0], year)
              for authors, year in entries}
    assert len(listed) >= 25
    # citations in the text: "Name (YYYY)", "Name YYYY", "Name et al. YYYY",
    # "Name & Other (YYYY)", "Name, Other & Third YYYY"
    cited = set(re.findall(
        r"\b([A-Z][A-Za-z\-]+)(?:\s+et al\.)?(?:(?:,|\s+&|\s+and)\s+[A-Z][A-Za-z\-]+)*,?"
        r"\s+\(?(\d{4})\b",
        body))
    missing = sorted(c for c in cited if c not in listed and c[0] not in _NOT_AUTHORS)
    assert missing == [], f"cited in methods.md but not in its reference list: {missing}"


#: Capitalised words that precede a year in methods.md without being a citation.
_NOT_AUTHORS = {"KDD"}
