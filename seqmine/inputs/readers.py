"""Read event files into a table of text cells, one row per record (private).

Every reader returns a DataFrame of strings with one row per record of the file, in
file order, and in ``attrs["bad_rows"]`` the records that could not be read:
``{record number: (reason, detail)}`` (their cells are empty). Gzip-, bzip2- and
xz-compressed files are recognised by their first bytes and read directly, whatever
their name; zip archives and Zstandard files are refused with what to do.

Delimited text is scanned once before it is parsed: a record (a line, or several when
a quoted field holds a line break) with more or fewer fields than the header goes to
the rejects with reason ``bad_fields`` and its physical line number, and the rest
loads. A quote that is never closed takes only the line it opens on: reading starts
again on the next line.
"""

from __future__ import annotations

import bz2
import codecs
import csv
import gzip
import io
import lzma
import json
import zlib
from itertools import islice
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataFileError, ParameterError

__all__ = ["guess_format", "read_bytes", "compression_of", "uncompressed_size",
           "read_delimited",
           "read_parquet", "read_jsonl", "read_xapi", "FORMATS"]

FORMATS = ("csv", "tsv", "parquet", "jsonl", "xapi")
_GZIP_MAGIC = b"\x1f\x8b"
_ZIP_MAGIC = b"PK\x03\x04"
_ZSTD_MAGIC = b"\x28\xb5\x2f\xfd"
#: Compressed forms read directly: name -> opener (recognised by :func:`compression_of`).
_OPENERS = {"gzip": gzip.open, "bzip2": bz2.open, "xz": lzma.open}
#: Name endings of compressed files, looked through to find the format.
COMPRESSED_SUFFIXES = (".gz", ".bz2", ".xz")
_QUOTE = 34
_NL = 10
_CR = 13


def guess_format(path):
    """Format from the file name (a ``.gz`` ending is looked through); a name without a
    telling ending (standard input, a pipe) is recognised by its first character: ``{``
    JSON Lines, ``[`` xAPI statements, else CSV."""
    name = Path(path).name.lower()
    for suffix in COMPRESSED_SUFFIXES:
        name = name.removesuffix(suffix)
    if name.endswith((".tsv", ".tab")):
        return "tsv"
    if name.endswith((".parquet", ".pq")):
        return "parquet"
    if name.endswith((".jsonl", ".ndjson")):
        return "jsonl"
    if name.endswith(".json"):
        return "xapi"
    if not name.endswith((".csv", ".txt")):
        first = _first_byte(path)  # no telling extension (standard input, a pipe)
        if first == b"{":
            return "jsonl"
        if first == b"[":
            return "xapi"
    return "csv"


def _first_byte(path):
    """The first byte of ``path`` after a byte-order mark and white space (b"" if none)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(4096)
    except OSError:
        return b""
    return head.removeprefix(b"\xef\xbb\xbf").lstrip()[:1]


def compression_of(path):
    """``"gzip"``, ``"bzip2"``, ``"xz"`` or None (plain), from the file's first bytes.

    Examples
    --------
    >>> import bz2, pathlib, tempfile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "events.csv.bz2"
    >>> _ = p.write_bytes(bz2.compress(b"learner,time,action"))
    >>> compression_of(p)
    'bzip2'
    """
    with open(path, "rb") as fh:
        head = fh.read(10)
    if head.startswith(_GZIP_MAGIC):
        return "gzip"
    if head.startswith(b"\xfd7zXZ\x00"):
        return "xz"
    # "BZh", the block size digit, then a block or the end-of-stream signature
    if (head[:3] == b"BZh" and head[3:4] in (b"1", b"2", b"3", b"4", b"5", b"6", b"7",
                                              b"8", b"9")
            and head[4:10] in (b"\x31\x41\x59\x26\x53\x59", b"\x17\x72\x45\x38\x50\x90")):
        return "bzip2"
    return None


def uncompressed_size(path, size):
    """Bytes after decompression (the gzip trailer's size, or a tenfold guess when the
    trailer cannot be right or the format has none); ``size`` for plain files."""
    kind = compression_of(path)
    if kind is None:
        return size
    if kind != "gzip" or size < 4:  # no usable trailer: reading it will say so
        return 10 * size
    with open(path, "rb") as fh:
        fh.seek(-4, 2)
        trailer = int.from_bytes(fh.read(4), "little")
    # a trailer below the file size has wrapped at 4 GiB; one beyond any real
    # compression ratio belongs to a damaged file (reading it will say so)
    return trailer if size <= trailer <= 1000 * size else 10 * size


def read_bytes(path, what="events"):
    """The file's bytes, decompressed when gzip-, bzip2- or xz-compressed."""
    with open(path, "rb") as fh:
        head = fh.read(4)
    if head.startswith(_ZIP_MAGIC):
        raise DataFileError(
            f"{path}: is a zip archive; unzip it and give the {what} file inside (gzip, "
            f"bzip2 and xz files are read directly).")
    if head.startswith(_ZSTD_MAGIC):
        raise DataFileError(
            f"{path}: is Zstandard-compressed, which this Python cannot read; decompress it "
            f"(zstd -d) or compress it with gzip instead.")
    kind = compression_of(path)
    if kind is not None:
        try:
            with _OPENERS[kind](path, "rb") as fh:
                return fh.read()
        except (OSError, EOFError, ValueError, zlib.error, lzma.LZMAError) as exc:
            raise DataFileError(
                f"{path}: the {kind} data is damaged ({type(exc).__name__}: "
                f"{' '.join(str(exc).split())}); compress the file again.") from None
    return Path(path).read_bytes()


def _text_codec(encoding):
    try:
        return codecs.lookup(encoding).name
    except LookupError:
        raise ParameterError(f"Unknown text encoding {encoding!r}; use e.g. utf-8 or latin-1.") from None


def _utf8_bytes(path, data, encoding):
    """``data`` as UTF-8 bytes without a byte-order mark (decoded from ``encoding``)."""
    codec = _text_codec(encoding)
    if codec == "utf-8":  # checked where it is decoded (see _decoded)
        return data[3:] if data.startswith(codecs.BOM_UTF8) else data
    try:
        text = data.decode(encoding)
    except UnicodeDecodeError as exc:
        raise DataFileError(_decode_message(path, data, encoding, exc)) from None
    return text.lstrip("\ufeff").encode("utf-8")


def _decoded(path, buf, call, *args, **kwargs):
    """``call(*args, **kwargs)``; a UnicodeDecodeError of the UTF-8 buffer becomes a
    message naming the first line that is not UTF-8."""
    try:
        return call(*args, **kwargs)
    except UnicodeDecodeError:
        try:
            buf.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise DataFileError(_decode_message(path, buf, "utf-8", exc)) from None
        raise


def _decode_message(path, data, encoding, exc):
    """One-line message naming the first line of ``data`` that is not ``encoding`` text."""
    line = data.count(b"\n", 0, exc.start) + 1
    start = data.rfind(b"\n", 0, exc.start) + 1
    where = f" (line {line}, byte {exc.start - start + 1} of that line)"
    return (f"{path}: not valid {encoding} text{where}; re-save the file as UTF-8 or pass "
            f"--encoding (e.g. latin-1).")


# ------------------------------------------------------------------ delimited
def read_delimited(path, fmt, delimiter, encoding):
    """A delimited text file as text cells, with wrong-width records set aside."""
    buf = _utf8_bytes(path, read_bytes(path), encoding)
    if b"\x00" in buf:
        # pandas' C parser (before pandas 3) ends a field at a NUL byte, which would
        # silently shorten a value such as "open\x00chart"; as U+0001 the row keeps its
        # length and is rejected as control_characters like any other control character
        buf = buf.replace(b"\x00", b"\x01")
    lineterminator = None
    if b"\n" not in buf and b"\r" in buf:  # old Mac line ends
        buf = buf.replace(b"\r", b"\n")
    elif b"\r" in buf and buf.count(b"\r") > buf.count(b"\r\n"):
        # a carriage return inside a field of a line-feed file is a character of that
        # field (rejected as a control character), not the end of a record
        buf = buf.replace(b"\r\n", b"\n")
        lineterminator = "\n"
    first = _decoded(path, buf, lambda: buf.split(b"\n", 1)[0].decode("utf-8"))
    if not first.strip():
        raise DataFileError(f"{path}: the first line (header) is empty; the file needs a header row.")
    sep = delimiter or ("\t" if fmt == "tsv" else ",")
    if delimiter is None:
        counts = {c: first.count(c) for c in (",", "\t", ";", "|")}
        if counts.get(sep, 0) == 0 and max(counts.values()) > 0:
            sep = max(counts, key=counts.get)
    scan = _scan_records(buf, sep)
    if scan is None:  # a quote is never closed: careful line-by-line reading
        header, rows, bad = _read_python(_decoded(path, buf, buf.decode, "utf-8"), sep)
        return _frame_from_rows(path, header, rows, bad)
    starts, ends, nfields, lines = scan
    if len(starts) == 0:
        raise DataFileError(f"{path}: no columns found; is the file empty?")
    expected = int(nfields[0])
    data_fields = nfields[1:]
    wrong = np.flatnonzero(data_fields != expected)
    bad = {int(i) + 1: ("bad_fields", f"line {int(lines[i + 1])}: {int(data_fields[i])} "
                                      f"field(s), expected {expected}") for i in wrong}
    n_records = len(starts) - 1
    if bad:
        keep = np.ones(len(starts), dtype=bool)
        keep[wrong + 1] = False
        pieces = [buf[s:e] for s, e in zip(starts[keep].tolist(), ends[keep].tolist())]
        source = io.BytesIO(b"\n".join(pieces) + b"\n")
    else:
        source = io.BytesIO(buf)
    try:
        df = _decoded(path, buf, pd.read_csv, source, sep=sep, dtype=str,
                      keep_default_na=False, na_values=[], encoding="utf-8",
                      skip_blank_lines=True, engine="c", lineterminator=lineterminator)
    except pd.errors.EmptyDataError:
        raise DataFileError(f"{path}: no columns found; is the file empty?") from None
    except pd.errors.ParserError:
        df = None
    if df is None or len(df) != n_records - len(bad):
        # the parser and the scan disagree (e.g. a quote inside an unquoted field):
        # the careful reading decides
        header, rows, bad = _read_python(_decoded(path, buf, buf.decode, "utf-8"), sep)
        return _frame_from_rows(path, header, rows, bad)
    df.columns = [str(c).strip() for c in df.columns]
    if bad:
        good = np.setdiff1d(np.arange(n_records), np.array(sorted(bad)) - 1)
        df.index = good
        df = df.reindex(pd.RangeIndex(n_records), fill_value="")
    df.attrs["bad_rows"] = bad
    return df


def _scan_records(buf, sep):
    """Start, end, field count and first physical line of every non-blank record, or
    None when the quotes do not pair up. Separators and line breaks inside a quoted
    field (an odd number of quotes before them) do not count."""
    arr = np.frombuffer(buf, dtype=np.uint8)
    quotes = np.flatnonzero(arr == _QUOTE)
    if len(quotes) % 2:
        return None
    newlines = np.flatnonzero(arr == _NL)
    seps = np.flatnonzero(arr == ord(sep))
    if len(quotes):
        newlines_s = newlines[np.searchsorted(quotes, newlines) % 2 == 0]
        seps = seps[np.searchsorted(quotes, seps) % 2 == 0]
    else:
        newlines_s = newlines
    ends = newlines_s
    if len(arr) and (len(ends) == 0 or ends[-1] != len(arr) - 1):
        ends = np.append(ends, len(arr))
    starts = np.concatenate([[0], newlines_s + 1])[:len(ends)]
    stop = ends.copy()
    # a record's last byte before the line feed may be a carriage return
    has_cr = (stop > starts) & (arr[np.maximum(stop - 1, 0)] == _CR)
    stop[has_cr] -= 1
    nonblank = stop > starts
    starts, stop = starts[nonblank], stop[nonblank]
    nfields = np.searchsorted(seps, stop) - np.searchsorted(seps, starts) + 1
    lines = np.searchsorted(newlines, starts) + 1
    return starts, stop, nfields, lines


def _read_python(text, sep):
    """Header, good rows and bad records of delimited text, read record by record.

    A record with the wrong number of fields is rejected; when it spans several
    physical lines (a quote opened and not closed where expected), only its first line
    is rejected and reading starts again on the line after it.
    """
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    lines = [ln + "\n" for ln in lines]
    header, rows, bad = None, [], {}
    pos = 0
    record = 0
    while pos < len(lines):
        reader = csv.reader(islice(lines, pos, None), delimiter=sep, strict=False)
        used = 0
        restart = None
        while True:
            try:
                row = next(reader)
            except StopIteration:
                break
            except csv.Error as exc:  # e.g. a NUL byte: the record's first line goes
                restart = ("bad_fields", pos + used, f"line {pos + used + 1}: "
                           f"{' '.join(str(exc).split())}")
                break
            first_line = pos + used
            span = reader.line_num - used
            used = reader.line_num
            if not row or (len(row) == 1 and not row[0].strip("\r")):
                continue  # blank line
            if header is None:
                header = [c.strip() for c in row]
                continue
            record += 1
            unclosed = sum(lines[k].count('"') for k in range(first_line, first_line + span)) % 2
            if len(row) == len(header) and not unclosed:
                rows.append((record, row))
                continue
            if span > 1 or unclosed:
                what = ("a quote opened on this line is never closed" if unclosed else
                        f"a quoted field opened on this line is not closed where expected "
                        f"({len(row)} field(s), expected {len(header)})")
                restart = ("bad_fields", first_line,
                           f"line {first_line + 1}: {what}; reading resumed on the next line")
                record -= 1
                break
            bad[record] = ("bad_fields", f"line {first_line + 1}: {len(row)} field(s), "
                                         f"expected {len(header)}")
        if restart is None:
            break
        code, line_index, detail = restart
        if header is None:
            break
        record += 1
        bad[record] = (code, detail)
        pos = line_index + 1
    return header, rows, bad


def _frame_from_rows(path, header, rows, bad):
    if header is None:
        raise DataFileError(f"{path}: no columns found; is the file empty?")
    n = len(rows) + len(bad)
    table = np.full((n, len(header)), "", dtype=object)
    for rec, row in rows:
        table[rec - 1] = row
    df = pd.DataFrame(table, columns=header)
    df.attrs["bad_rows"] = bad
    return df


# ------------------------------------------------------------------ others
def read_parquet(path):
    """A Parquet file as text cells (times as ISO 8601)."""
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise DataFileError(
            f"{path}: reading Parquet needs pyarrow; install it with "
            f"'pip install seqmine[parquet]'.") from None
    try:
        pf = pq.ParquetFile(path)
        # read by row groups to keep peak memory near one group plus the result
        parts = [pf.read_row_group(i).to_pandas() for i in range(pf.num_row_groups)]
    except Exception as exc:  # pyarrow raises several unrelated types
        raise DataFileError(f"{path}: not a readable Parquet file ({type(exc).__name__}).") from None
    df = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
    return _stringify(df)


def _stringify(df):
    out = {}
    for c in df.columns:
        col = df[c]
        if pd.api.types.is_datetime64_any_dtype(col):
            aware = getattr(col.dt, "tz", None) is not None
            # zone-aware times are written in UTC ("Z"); naive ones stay naive
            vals = (col.dt.tz_convert("UTC") if aware else col).dt.strftime(
                "%Y-%m-%dT%H:%M:%S.%f") + ("Z" if aware else "")
            out[str(c)] = vals.fillna("")
        else:
            out[str(c)] = col.astype("string").fillna("").astype(str)
    return pd.DataFrame(out)


def _lines(path, encoding):
    buf = _utf8_bytes(path, read_bytes(path), encoding)
    text = _decoded(path, buf, buf.decode, "utf-8")
    return [ln.removesuffix("\r") for ln in text.split("\n")]


def read_jsonl(path, encoding):
    """JSON Lines as text cells; a line that is not a JSON object is ``bad_json``."""
    records, bad = [], {}
    row = 0
    for line in _lines(path, encoding):
        if not line.strip():
            continue
        row += 1
        obj = _json_or_none(line)
        if not isinstance(obj, dict):
            bad[row] = ("bad_json", "")
            records.append({})
        else:
            records.append({str(k): ("" if v is None else str(v)) for k, v in obj.items()
                            if not isinstance(v, (dict, list))})
    df = _frame(records)
    df.attrs["bad_rows"] = bad
    return df


def _json_or_none(line):
    """The parsed line, or None when it is not JSON Python can hold (also integers
    past the 4300-digit conversion limit and nesting past the recursion limit)."""
    try:
        return json.loads(line)
    except (ValueError, RecursionError):
        return None


def _frame(records):
    """One row per record, even when every record is empty (unreadable lines)."""
    if not records:
        return pd.DataFrame()
    return pd.DataFrame(records, index=pd.RangeIndex(len(records))).fillna("")


def _xapi_text(value):
    """Readable text of an xAPI language map or identifier."""
    if isinstance(value, dict):
        for key in ("en-US", "en", "und"):
            if value.get(key):
                return str(value[key])
        for v in value.values():
            if v:
                return str(v)
        return ""
    return "" if value is None else str(value)


def _last_segment(iri):
    iri = str(iri or "").rstrip("/")
    for sep in ("/", "#", ":"):
        if sep in iri:
            iri = iri.rsplit(sep, 1)[1]
    return iri


def _xapi_actor(actor):
    if not isinstance(actor, dict):
        return ""
    acc = actor.get("account")
    if isinstance(acc, dict) and acc.get("name"):
        return str(acc["name"])
    for key in ("mbox", "mbox_sha1sum", "openid", "name"):
        if actor.get(key):
            v = str(actor[key])
            return v[len("mailto:"):] if v.startswith("mailto:") else v
    return ""


def read_xapi(path, encoding):
    """xAPI statements (a JSON array, an object with ``statements``, or one per line)."""
    text = "\n".join(_lines(path, encoding))
    try:
        doc = json.loads(text)
        statements = doc.get("statements", []) if isinstance(doc, dict) else doc
        if isinstance(doc, dict) and "statements" not in doc:
            statements = [doc]
    except (ValueError, RecursionError):  # not one JSON document: try one per line
        statements = [_json_or_none(line) for line in text.splitlines() if line.strip()]
    if not isinstance(statements, list):
        raise DataFileError(f"{path}: expected a JSON array of xAPI statements.")
    records, bad = [], {}
    for i, st in enumerate(statements, start=1):
        if not isinstance(st, dict):
            bad[i] = ("bad_json", "")
            records.append({})
            continue
        verb = st.get("verb") if isinstance(st.get("verb"), dict) else {}
        obj = st.get("object") if isinstance(st.get("object"), dict) else {}
        ctx = st.get("context") if isinstance(st.get("context"), dict) else {}
        definition = obj.get("definition") if isinstance(obj.get("definition"), dict) else {}
        action = _xapi_text(verb.get("display")) or _last_segment(verb.get("id"))
        target = _xapi_text(definition.get("name")) or _last_segment(obj.get("id"))
        rec = {
            "learner": _xapi_actor(st.get("actor")),
            "action": action,
            "time": str(st.get("timestamp") or ""),
            "target": target,
            "session": str(ctx.get("registration") or ""),
            "channel": "",
        }
        if not (rec["learner"] and rec["action"] and rec["time"]):
            bad[i] = ("bad_statement", "")
        records.append(rec)
    df = _frame(records)
    df.attrs["bad_rows"] = bad
    return df
