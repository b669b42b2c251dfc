"""The one control-character rule: the same characters are rejected by the loader and
the live watcher, and the rule is Unicode's general category Cc."""

import re
import sys
import unicodedata

import pytest

from seqmine._util.text import (
    CONTROL_CHARACTERS,
    has_control_characters,
    replace_control_characters,
)
from seqmine.detection.watcher import EventError, Watcher
from seqmine.inputs.load import load_events

#: Inside a value: controls (tab, line feed, carriage return, NUL, ESC, DEL, NEL, C1 end)
#: and characters that look odd but are not controls (no-break space, line separator,
#: zero-width joiner, e acute, an emoji).
INSIDE = ["\t", "\n", "\r", "\x00", "\x1b", "\x7f", "\x85", "\x9f",
          "\u00a0", "\u2028", "\u200d", "\u00e9", "\U0001f331"]


def test_the_rule_is_unicode_category_cc():
    # Reference: the Unicode Character Database as shipped with Python (unicodedata).
    chars = "".join(chr(c) for c in range(sys.maxunicode + 1) if not 0xD800 <= c <= 0xDFFF)
    ours = set(re.findall(CONTROL_CHARACTERS, chars))
    cc = {c for c in chars if unicodedata.category(c) == "Cc"}
    assert ours == cc and len(cc) == 65


def _watcher_rejects(text):
    doc = {"format": "seqmine-detectors", "version": 1, "encoding": {"template": "{action}"},
           "matching": {"max_gap": None, "max_window": None, "skip_pauses": False},
           "detectors": [{"id": "d", "tokens": ["reset"], "direction": "discourage"}]}
    w = Watcher(doc)
    try:
        w.process({"learner": "L1", "time": 1, "action": text})
    except EventError as exc:
        assert "contains control characters" in str(exc)
        return True
    return False


@pytest.mark.parametrize("char", INSIDE, ids=[f"U+{ord(c):04X}" for c in INSIDE])
def test_loader_and_watcher_reject_the_same_characters(tmp_path, char):
    action = f"set{char}light"
    path = tmp_path / "events.csv"
    # written by hand: the csv module of Python 3.10 cannot write a NUL character
    quoted = '"' + action.replace('"', '""') + '"'
    path.write_bytes(f"learner,time,action\nL1,1,{quoted}\nL1,2,reset\n".encode("utf-8"))
    res = load_events(path)
    loader_rejects = "control_characters" in set(res.rejects["reason"])
    expected = unicodedata.category(char) == "Cc"
    assert loader_rejects == expected == has_control_characters(action)
    assert _watcher_rejects(action) == expected
    if not expected:
        assert action in set(res.events["action"])


def test_white_space_around_a_value_is_stripped_first(tmp_path):
    path = tmp_path / "events.csv"
    path.write_text('learner,time,action\n"L1\t",1,"set_light\r\n"\n', encoding="utf-8")
    assert load_events(path).events["action"].tolist() == ["set_light"]
    assert not _watcher_rejects("\tset_light\n")


def test_report_keeps_layout_white_space():
    assert replace_control_characters("a\tb\nc\x1bd\x85") == "a\ufffdb\ufffdc\ufffdd\ufffd"
    assert replace_control_characters("a\tb\nc\x1bd\x85", keep_layout=True) == (
        "a\tb\nc\ufffdd\ufffd")
