"""CSV output shared by every stage: one format for every table seqmine writes.

Formula neutralisation
----------------------
A spreadsheet runs a cell that starts with ``=``, ``+``, ``-`` or ``@`` (and, in some
programs, a tab or carriage return) as a formula. Action names, group labels and
learner ids come from logs, so :func:`write_csv` writes every such text cell that is
not a number with a leading apostrophe (``'=cmd``), which spreadsheets show as text:
the advice of the OWASP page on CSV injection. A cell that already starts with
apostrophes followed by one of these characters gets one more apostrophe, so the
change can be undone exactly: :func:`read_csv` removes one apostrophe from every cell
that starts with apostrophes followed by a trigger character. Column names are
treated the same way. Numbers (``-1.5``, ``+3``, ``1e-05``, ``-inf``) stay as they
are.
"""

from __future__ import annotations

import csv
import re

from .outdir import open_new

__all__ = ["write_csv", "read_csv", "neutralise", "restore", "CSV_OPTIONS",
           "FORMULA_TRIGGERS"]

#: How every result table is written: no index, Unix line ends, 10 significant digits.
CSV_OPTIONS = {"index": False, "lineterminator": "\n", "float_format": "%.10g"}

#: First characters that make a spreadsheet treat a cell as a formula.
FORMULA_TRIGGERS = "=+-@\t\r"

_RISKY = re.compile(r"'*[=+\-@\t\r]")
_ESCAPED = re.compile(r"'+[=+\-@\t\r]")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|[+-]?(?:inf|nan)",
                     re.IGNORECASE)


def neutralise(text):
    """``text`` as written to a CSV cell: one apostrophe added when it could run as a formula.

    Examples
    --------
    >>> [neutralise(s) for s in ["=1+2", "-1.5", "set_light", "@x", "'=x", "'x"]]
    ["'=1+2", '-1.5', 'set_light', "'@x", "''=x", "'x"]
    """
    if _RISKY.match(text) and not _NUMBER.fullmatch(text):
        return "'" + text
    return text


def restore(text):
    """Undo :func:`neutralise` (one apostrophe removed before a trigger character).

    Examples
    --------
    >>> all(restore(neutralise(s)) == s for s in ["=1+2", "-1.5", "''@x", "'a", "\\t=", ""])
    True
    """
    if _ESCAPED.match(text):
        return text[1:]
    return text


def write_csv(frame, path):
    """Write ``frame`` to ``path`` in seqmine's one CSV format (see :data:`CSV_OPTIONS`).

    Text cells (and column names) that a spreadsheet would run as a formula are
    neutralised (see the module notes). The file is created afresh: an existing file
    or link at ``path`` is replaced, never written through.

    Returns the path, so callers can list what they wrote.

    Examples
    --------
    >>> import pandas as pd, tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> path = write_csv(pd.DataFrame({"pattern": ["a > b", "=cmd"], "q": [1 / 3, -1]}),
    ...                  folder / "t.csv")
    >>> path.read_text()
    "pattern,q\\na > b,0.3333333333\\n'=cmd,-1\\n"
    >>> read_csv(path)["pattern"].tolist()
    ['a > b', '=cmd']
    """
    safe = _neutralised(frame)
    options = dict(CSV_OPTIONS)
    if _holds_carriage_return(safe):
        # a lone CR is not quoted by the minimal rule (the line end is LF), and readers
        # would take it for a line end: quote every text cell of this table instead
        options["quoting"] = csv.QUOTE_NONNUMERIC
    with open_new(path, "w", newline="") as fh:
        safe.to_csv(fh, **options)
    return path


def read_csv(path, **kwargs):
    """Read a CSV written by :func:`write_csv`, undoing the formula neutralisation.

    Keyword arguments go to :func:`pandas.read_csv`. Text cells and column names lose
    the apostrophe :func:`write_csv` added; numeric columns are unchanged.
    """
    import pandas as pd
    frame = pd.read_csv(path, **kwargs)
    return restore_frame(frame)


def restore_frame(frame):
    """``frame`` (read from a seqmine CSV) with the neutralisation undone, in place."""
    import pandas as pd
    frame.columns = [restore(c) if isinstance(c, str) else c for c in frame.columns]
    for col in frame.columns:
        s = frame[col]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            mask = s.map(lambda v: isinstance(v, str) and v[:1] == "'")
            if mask.any():
                frame[col] = s.where(~mask, s[mask].map(restore))
    return frame


def _text_columns(frame):
    """(position, column) of the columns that can hold text."""
    import pandas as pd
    for k in range(frame.shape[1]):
        s = frame.iloc[:, k]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            yield k, s


def _holds_carriage_return(frame):
    if any(isinstance(c, str) and "\r" in c for c in frame.columns):
        return True
    return any(s.astype("string").str.contains("\r", regex=False).fillna(False).any()
               for _k, s in _text_columns(frame))


def _neutralised(frame):
    """A copy of ``frame`` whose risky text cells and column names are neutralised
    (``frame`` itself when nothing needs changing)."""
    out = None
    cols = [neutralise(c) if isinstance(c, str) else c for c in frame.columns]
    if cols != list(frame.columns):
        out = frame.copy()
        out.columns = cols
    for k, s in _text_columns(frame):
        # candidates by their first character (vectorised), then the exact rule
        first = s.astype("string").str[:1]
        cand = first.isin(list("'=+-@\t\r")).fillna(False).to_numpy(bool)
        if not cand.any():
            continue
        values = s.to_numpy(object)
        fixed = [neutralise(v) if isinstance(v, str) else v for v in values[cand]]
        if all(a is b for a, b in zip(fixed, values[cand])):
            continue
        if out is None:
            out = frame.copy()
        values = values.copy()
        values[cand] = fixed
        out.isetitem(k, values)
    return frame if out is None else out
