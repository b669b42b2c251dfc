"""Text for terminals: nothing a log or a detectors file holds may move the cursor,
recolour or reorder what a person reads (C0 and C1 control characters, ESC, DEL,
bidirectional overrides are escaped)."""

from __future__ import annotations

import re

__all__ = ["terminal_safe", "terminal_safe_json"]

#: Characters escaped in JSON written to a terminal: DEL, C1 controls, line and paragraph
#: separators, bidirectional overrides and isolates (JSON escapes C0 itself).
_UNSAFE_IN_JSON = re.compile("[\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def terminal_safe_json(text):
    """JSON text with every character a terminal could act on written as ``\\uXXXX``
    (the same JSON value; only strings can hold such characters).

    Examples
    --------
    >>> terminal_safe_json('{"hint": "\\x9b31m\\u202e"}')
    '{"hint": "\\\\u009b31m\\\\u202e"}'
    """
    return _UNSAFE_IN_JSON.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


def terminal_safe(text):
    """``text`` with every character that is not printable (C0 and C1 controls, ESC,
    DEL, bidirectional marks) written as a Python escape, so a message never moves
    the cursor, recolours or reorders a terminal.

    Examples
    --------
    >>> terminal_safe("bad \\x1b[31mred\\x9b")
    'bad \\\\x1b[31mred\\\\x9b'
    """
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii")
                   for c in text)
