"""JSON output shared by every stage: numpy values become plain JSON, files end in a newline."""

from __future__ import annotations

import json

import numpy as np

from .outdir import open_new

__all__ = ["json_default", "write_json", "dumps"]


def json_default(obj):
    """JSON for numpy scalars and arrays (and ranges) in summaries and model files.

    Examples
    --------
    >>> import json, numpy as np
    >>> json.dumps({"n": np.int64(3), "x": np.arange(2), "r": range(2)}, default=json_default)
    '{"n": 3, "x": [0, 1], "r": [0, 1]}'
    """
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, range):
        return list(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def dumps(data, *, indent=2):
    """Deterministic JSON text: sorted keys, UTF-8 kept, numpy values converted."""
    return json.dumps(data, indent=indent, sort_keys=True, ensure_ascii=False, default=json_default)


def write_json(path, data, *, indent=2):
    """Write ``data`` as deterministic JSON (see :func:`dumps`) with a final newline, into
    a new file (never through a link)."""
    with open_new(path, "w", newline="\n") as fh:
        fh.write(dumps(data, indent=indent) + "\n")
