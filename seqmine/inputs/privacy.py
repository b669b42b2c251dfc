"""Pseudonymization of learner identifiers with a keyed hash (HMAC-SHA256).

The same key gives the same pseudonym for the same identifier in every run, so
outputs of several runs can be joined; without the key the mapping cannot be
recomputed. Apply it right after loading, so that no later output ever sees a raw
identifier.
"""

from __future__ import annotations

import hashlib
import hmac
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataFileError

__all__ = ["read_key", "pseudonymize", "pseudonymize_frame", "MIN_KEY_BYTES"]

#: Shortest accepted key (bytes, after stripping surrounding whitespace).
MIN_KEY_BYTES = 16

_PREFIX = "p_"
_HEX_CHARS = 16  # 64 bits: collisions are checked, not assumed away


def read_key(path):
    """Read a pseudonymization key file (any bytes; at least 16 after stripping).

    Create one with e.g. ``python -c "import secrets; print(secrets.token_hex(32))" > key.txt``
    and keep it apart from the outputs.
    """
    path = Path(path)
    if not path.is_file():
        raise DataFileError(f"{path}: key file not found; create one with "
                            f"python -c \"import secrets; print(secrets.token_hex(32))\" > {path}")
    key = path.read_bytes().strip()
    if len(key) < MIN_KEY_BYTES:
        raise DataFileError(
            f"{path}: the key has {len(key)} bytes; use at least {MIN_KEY_BYTES} random bytes "
            f"(e.g. secrets.token_hex(32)).")
    return key


def pseudonymize(identifiers, key):
    """Keyed-hash pseudonyms of ``identifiers``.

    Parameters
    ----------
    identifiers : iterable of str
    key : bytes

    Returns
    -------
    ndarray of str
        ``"p_" + 16 hex characters`` of HMAC-SHA256(key, identifier).

    Examples
    --------
    >>> a = pseudonymize(["ana", "ben", "ana"], b"0123456789abcdef")
    >>> a[0] == a[2], a[0] != a[1], a[0].startswith("p_"), len(a[0])
    (True, True, True, 18)
    """
    ids = pd.unique(np.asarray(list(identifiers), dtype=object))
    table = {}
    seen = {}
    for ident in ids:
        digest = hmac.new(key, str(ident).encode("utf-8"), hashlib.sha256).hexdigest()
        p = _PREFIX + digest[:_HEX_CHARS]
        if p in seen and seen[p] != ident:  # pragma: no cover - 2**-64 per pair
            p = _PREFIX + digest  # fall back to the full digest
        seen[p] = ident
        table[ident] = p
    return np.array([table[i] for i in np.asarray(list(identifiers), dtype=object)], dtype=object)


def pseudonymize_frame(df, key, column="learner"):
    """A copy of ``df`` with ``column`` replaced by pseudonyms."""
    out = df.copy()
    if column in out.columns and len(out):
        uniq, inv = np.unique(out[column].astype(str).to_numpy(), return_inverse=True)
        out[column] = pseudonymize(uniq, key)[inv]
    return out
