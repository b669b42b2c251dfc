"""Pseudonymization of learner identifiers with a keyed hash (HMAC-SHA256).

The same key gives the same pseudonym for the same identifier in every run, so
outputs of several runs can be joined; without the key the mapping cannot be
recomputed. Apply it right after loading, so that no later output ever sees a raw
identifier.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataFileError

__all__ = ["read_key", "new_key", "write_key", "key_fingerprint", "pseudonymize",
           "pseudonymize_frame", "pseudonymize_value", "MIN_KEY_BYTES", "MIN_DISTINCT_BYTES"]

#: Shortest accepted key (bytes, after stripping surrounding whitespace).
MIN_KEY_BYTES = 16
#: Fewest different byte values an accepted key holds.
MIN_DISTINCT_BYTES = 8

_PREFIX = "p_"
_HEX_CHARS = 16  # 64 bits: collisions are checked, not assumed away


def read_key(path):
    """Read a pseudonymization key file.

    A key needs at least :data:`MIN_KEY_BYTES` bytes (after stripping surrounding white
    space) with at least :data:`MIN_DISTINCT_BYTES` different byte values, so that
    ``0000000000000000`` or 16 NUL bytes are refused. ``seqmine keygen KEY_FILE`` writes a
    strong key (see :func:`write_key`); keep it apart from the outputs.
    """
    path = Path(path)
    if path.is_dir():
        raise DataFileError(f"{path}: is a folder, not a key file; give the file written by "
                            f"'seqmine keygen {path / 'seqmine.key'}'.")
    if not path.is_file():
        raise DataFileError(f"{path}: key file not found; create one with 'seqmine keygen "
                            f"{path}'.")
    try:
        key = path.read_bytes().strip()
    except OSError as exc:
        raise DataFileError(f"{path}: the key file cannot be read ({exc.strerror}); check its "
                            f"permissions.") from None
    if len(key) < MIN_KEY_BYTES:
        raise DataFileError(
            f"{path}: the key has {len(key)} bytes; use at least {MIN_KEY_BYTES} random bytes "
            f"(create one with 'seqmine keygen KEY_FILE').")
    distinct = len(set(key))
    if distinct < MIN_DISTINCT_BYTES:
        raise DataFileError(
            f"{path}: the key uses only {distinct} different byte value(s); a key needs at "
            f"least {MIN_DISTINCT_BYTES} (it looks typed, not random): create one with "
            f"'seqmine keygen KEY_FILE'.")
    return key


def new_key():
    """A fresh random key: 64 hex characters (256 bits from :mod:`secrets`).

    Examples
    --------
    >>> k = new_key()
    >>> len(k), len(set(k)) >= MIN_DISTINCT_BYTES
    (64, True)
    """
    while True:
        key = secrets.token_hex(32).encode("ascii")
        if len(set(key)) >= MIN_DISTINCT_BYTES:  # fails with probability below 1e-40
            return key


def write_key(path):
    """Write a new key to ``path`` (which must not exist), readable by its owner only.

    Returns
    -------
    pathlib.Path
    """
    path = Path(path)
    if path.is_symlink() or path.exists():
        raise DataFileError(f"{path}: already exists; seqmine never overwrites a key (the "
                            f"pseudonyms made with it could not be reproduced): choose a new "
                            f"file name.")
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
    try:  # 0o600: the umask can only take bits away
        fd = os.open(path, flags, 0o600)
    except OSError as exc:
        raise DataFileError(f"{path}: cannot create the key file ({exc.strerror}); check the "
                            f"folder.") from None
    try:
        os.write(fd, new_key() + b"\n")
    finally:
        os.close(fd)
    return path


def key_fingerprint(key):
    """A short keyed check value of ``key`` that reveals nothing about it; two runs used
    the same key exactly when their fingerprints agree.

    Examples
    --------
    >>> key_fingerprint(b"0123456789abcdef") == key_fingerprint(b"0123456789abcdef")
    True
    """
    return hmac.new(key, b"seqmine key fingerprint", hashlib.sha256).hexdigest()[:16]


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


def pseudonymize_frame(df, key, column="learner", *, keep_empty=False):
    """A copy of ``df`` with ``column`` replaced by pseudonyms (empty cells stay empty
    with ``keep_empty``, as for sessions where empty means "none")."""
    out = df.copy()
    if column in out.columns and len(out):
        uniq, inv = np.unique(out[column].astype(str).to_numpy(), return_inverse=True)
        pseudo = pseudonymize(uniq, key)
        if keep_empty:
            pseudo = np.where(uniq == "", "", pseudo).astype(object)
        out[column] = pseudo[inv]
    return out


def pseudonymize_value(value, key):
    """Pseudonym of one identifier as a live event carries it: a JSON string, or a
    JSON number (``183`` and ``"183"`` get the same pseudonym, as the offline loader
    reads both as the text ``183``).

    Examples
    --------
    >>> k = b"0123456789abcdef"
    >>> pseudonymize_value(183, k) == pseudonymize_value("183", k) == pseudonymize(["183"], k)[0]
    True
    """
    text = value.strip() if isinstance(value, str) else str(value)
    return str(pseudonymize([text], key)[0])
