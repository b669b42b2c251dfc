"""CSV output shared by every stage: one format for every table seqmine writes."""

from __future__ import annotations

__all__ = ["write_csv", "CSV_OPTIONS"]

#: How every result table is written: no index, Unix line ends, 10 significant digits.
CSV_OPTIONS = {"index": False, "lineterminator": "\n", "float_format": "%.10g"}


def write_csv(frame, path):
    """Write ``frame`` to ``path`` in seqmine's one CSV format (see :data:`CSV_OPTIONS`).

    Returns the path, so callers can list what they wrote.

    Examples
    --------
    >>> import pandas as pd, tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> path = write_csv(pd.DataFrame({"pattern": ["a > b"], "q": [1 / 3]}), folder / "t.csv")
    >>> path.read_text()
    'pattern,q\\na > b,0.3333333333\\n'
    """
    frame.to_csv(path, **CSV_OPTIONS)
    return path
