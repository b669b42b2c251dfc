"""The one control-character rule, shared by the loader, the live watcher, the detectors
file check and the report.

A *control character* is any C0 control (U+0000 to U+001F, tab, line feed and carriage
return included), DEL (U+007F) or C1 control (U+0080 to U+009F): exactly Unicode's
general category ``Cc``. Learner identifiers and action names that contain one are
rejected (after leading and trailing white space is stripped), in the events file and in
the live stream alike, so a detector token containing one could never match. The report
replaces them with U+FFFD, keeping tab, line feed and carriage return, which HTML and
figure labels treat as plain white space.
"""

from __future__ import annotations

import re

__all__ = [
    "CONTROL_CHARACTERS",
    "TERMINAL_UNSAFE",
    "has_control_characters",
    "replace_control_characters",
    "terminal_safe",
    "terminal_safe_json",
]

#: Regular-expression character class of the control characters (category ``Cc``).
CONTROL_CHARACTERS = "[\x00-\x1f\x7f-\x9f]"

#: Characters that may not reach a terminal as they are: the control characters, and
#: the line/paragraph separators and bidirectional overrides and isolates, which move
#: or reorder what a person reads.
TERMINAL_UNSAFE = "[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]"

_CONTROL = re.compile(CONTROL_CHARACTERS)
_UNSAFE = re.compile(TERMINAL_UNSAFE)
_CONTROL_BUT_LAYOUT = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")


def has_control_characters(text):
    """True when ``text`` holds a control character.

    Examples
    --------
    >>> has_control_characters("set_light"), has_control_characters("set\\tlight")
    (False, True)
    >>> has_control_characters("caf\\u00e9 \\u2028"), has_control_characters("x\\x85")
    (False, True)
    """
    return _CONTROL.search(text) is not None


def replace_control_characters(text, *, keep_layout=False):
    """``text`` with each control character replaced by U+FFFD.

    Parameters
    ----------
    text : str
    keep_layout : bool, default False
        Keep tab, line feed and carriage return (for text shown as HTML or a label,
        where they are white space).

    Examples
    --------
    >>> replace_control_characters("a\\x00b\\tc")
    'a\\ufffdb\\ufffdc'
    >>> replace_control_characters("a\\x00b\\tc", keep_layout=True)
    'a\\ufffdb\\tc'
    """
    return (_CONTROL_BUT_LAYOUT if keep_layout else _CONTROL).sub("\ufffd", text)


def terminal_safe(text):
    """``text`` with every character of :data:`TERMINAL_UNSAFE` written as a Python
    escape, so a message never moves the cursor, recolours or reorders a terminal.

    Examples
    --------
    >>> terminal_safe("bad \\x1b[31mred\\x9b")
    'bad \\\\x1b[31mred\\\\x9b'
    """
    return _UNSAFE.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), text)


def terminal_safe_json(text):
    """JSON text with every character of :data:`TERMINAL_UNSAFE` written as ``\\uXXXX``
    (the same JSON value: only strings can hold such characters, and JSON already escapes
    C0 controls).

    Examples
    --------
    >>> terminal_safe_json('{"hint": "\\x9b31m\\u202e"}')
    '{"hint": "\\\\u009b31m\\\\u202e"}'
    """
    return _UNSAFE.sub(lambda m: f"\\u{ord(m.group()):04x}", text)
