"""Tests of pseudonymization."""

import hashlib
import hmac

import pandas as pd
import pytest

from seqmine.errors import DataFileError
from seqmine.inputs.privacy import pseudonymize, pseudonymize_frame, read_key

KEY = b"7c1f0e9a2b4d6c8e3a5f7b9d1e2c4a60"


def test_matches_hmac_sha256_reference():
    # reference: Python's hmac module (RFC 2104 HMAC with SHA-256)
    want = "p_" + hmac.new(KEY, "learner-7".encode(), hashlib.sha256).hexdigest()[:16]
    assert pseudonymize(["learner-7"], KEY)[0] == want


def test_consistent_and_key_dependent():
    a = pseudonymize(["x", "y"], KEY)
    assert list(pseudonymize(["y", "x"], KEY)) == [a[1], a[0]]
    assert list(pseudonymize(["x", "y"], b"z" * 32)) != list(a)


def test_frame_replaces_column():
    df = pd.DataFrame({"learner": ["a", "b", "a"], "v": [1, 2, 3]})
    out = pseudonymize_frame(df, KEY)
    assert out["learner"].nunique() == 2 and not set(out["learner"]) & {"a", "b"}
    assert df["learner"].tolist() == ["a", "b", "a"]  # input untouched


def test_key_file_checks(tmp_path):
    p = tmp_path / "key.txt"
    with pytest.raises(DataFileError, match="key file not found"):
        read_key(p)
    p.write_text("short\n")
    with pytest.raises(DataFileError, match="at least 16 random bytes"):
        read_key(p)
    # long but not random: one repeated byte value, NUL bytes, two alternating values
    for weak in (b"a" * 40, b"\0" * 16, b"0" * 16, b"01" * 20):
        p.write_bytes(weak + b"\n")
        with pytest.raises(DataFileError, match="different byte value"):
            read_key(p)
    p.write_text("3f9c1e0b7a5d42c8\n")
    assert read_key(p) == b"3f9c1e0b7a5d42c8"
    with pytest.raises(DataFileError, match="is a folder, not a key file"):
        read_key(tmp_path)


def test_encode_command_pseudonymizes_every_output(tmp_path, capsys):
    from seqmine.cli.main import main
    ev = tmp_path / "e.csv"
    ev.write_text("learner,time,action\n" + "".join(
        f"ana{i},{t},x{t % 2}\n" for i in range(4) for t in range(3)), encoding="utf-8")
    oc = tmp_path / "o.csv"
    oc.write_text("learner,pre,post,max\n" + "".join(f"ana{i},1,{2 + i},10\n" for i in range(4)),
                  encoding="utf-8")
    key = tmp_path / "key.txt"
    key.write_bytes(KEY)
    assert main(["encode", str(ev), "--outcomes", str(oc), "--out", str(tmp_path / "out"),
                 "--pseudonymize", str(key), "-q"]) == 0
    for f in (tmp_path / "out").rglob("*"):
        if f.is_file() and f.suffix in (".json", ".csv"):
            assert "ana" not in f.read_text(), f
