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
    "has_control_characters",
    "replace_control_characters",
]

#: Regular-expression character class of the control characters (category ``Cc``).
CONTROL_CHARACTERS = "[\x00-\x1f\x7f-\x9f]"

_CONTROL = re.compile(CONTROL_CHARACTERS)
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
