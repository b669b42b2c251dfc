"""``seqmine watch``: run detectors on a JSON-lines event stream, print firings."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from ..._util.text import terminal_safe, terminal_safe_json
from ...errors import DataFileError, ParameterError
from ...inputs.sources import STDIN, is_stream
from . import _options

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "watch"
HELP = "run detectors on live JSON-lines events and print firings as JSON lines"
DESCRIPTION = (
    "Read events as JSON lines (one object per line with learner, time (ISO 8601 or "
    "seconds) and action, optionally session, target and channel) from EVENTS or standard "
    "input, tokenise them exactly as the offline analysis did, and write one JSON line per "
    "detector firing to standard output: type, learner, detector, kind (occurrence or "
    "absence), direction, time, event_times, sequence, occurrence, priority, suppressed, "
    "reason and hint. Occurrence firings count exactly like the offline instance counts; "
    "'suppressed' marks hints held back by the cool-down, outranked by another firing "
    "of the same event, over the per-sequence limit of absence hints, or completed "
    "encourage patterns (not hinted unless --encourage-hints). Default delivery: "
    "discourage detectors hint when their pattern occurs, encourage detectors when their "
    "pattern is missing at its absence point. A bad event (malformed JSON, missing field, bad time, out of "
    "order beyond the tolerance, duplicate) gets one error line on standard error and "
    "is skipped; processing continues. Exit status 2 only for an unusable detectors file, a missing events file "
    "or a bad option."
)


def add_arguments(parser):
    """Options of ``seqmine watch``."""
    parser.add_argument("detectors", metavar="DETECTORS_JSON",
                        help="detectors file written by 'seqmine detectors'")
    parser.add_argument("events", metavar="EVENTS_JSONL", nargs="?", default=None,
                        help="JSON-lines events: a file, a named pipe, or '-' for standard "
                             "input (the default)")
    parser.add_argument("--cooldown", type=float, default=60.0, metavar="S",
                        help="seconds after a delivered hint during which further hints to "
                             "that learner are suppressed (default 60)")
    parser.add_argument("--idle-timeout", default="86400", metavar="S",
                        help="drop a learner's state after S seconds without events, or "
                             "'none' (default 86400)")
    parser.add_argument("--tolerance", type=float, default=1.0, metavar="S",
                        help="events older than the learner's latest by more than S seconds "
                             "are rejected (default 1)")
    parser.add_argument("--hints-only", action="store_true",
                        help="print only firings whose hint is delivered (not suppressed)")
    parser.add_argument("--encourage-hints", action="store_true",
                        help="deliver completed encourage patterns as hints too (e.g. praise)")
    parser.add_argument("--max-absence-hints", type=_options.int_or_none, default=2,
                        metavar="N",
                        help="most hints per sequence from encourage detectors whose pattern "
                             "is missing (absence rules); 'none' = no limit (default: 2)")
    _options.add_duplicates_option(parser, what="exact duplicate events")
    parser.add_argument("--times", choices=("auto", "seconds", "iso"), default="auto",
                        help="time format of the output (default: as the input)")
    parser.add_argument("--pseudonymize", metavar="KEY_FILE", default=None,
                        help="replace learner identifiers by keyed-hash pseudonyms (the same "
                             "key as 'seqmine analyze --pseudonymize' gives the same pseudonyms)")
    parser.add_argument("--summary", action="store_true",
                        help="print counters (events, rejected, firings, hints) to standard "
                             "error at the end")


def run(args):
    """Run ``seqmine watch``."""
    from ...detection.watcher import Watcher
    idle = _idle(args.idle_timeout)
    pseudo = _pseudonymizer(args.pseudonymize) if args.pseudonymize else None
    watcher = Watcher(args.detectors, cooldown_seconds=args.cooldown, idle_timeout=idle,
                      out_of_order_tolerance=args.tolerance,
                      hint_on_encourage=args.encourage_hints,
                      max_absence_hints=args.max_absence_hints,
                      reject_duplicates=args.duplicates == "reject")
    err = sys.stderr
    out = sys.stdout
    for note in watcher.notes:
        _say(err, f"seqmine watch: note: {note}")
    watcher.notes.clear()
    if args.events is None or args.events == STDIN:
        stream, name, interactive = sys.stdin, "<stdin>", True
    else:
        path = Path(args.events)
        piped = is_stream(path)  # a named pipe or <(...): read as it arrives
        if path.is_dir():
            raise DataFileError(f"{path}: is a folder, not a JSON-lines events file.")
        if not (path.is_file() or piped):
            raise DataFileError(f"{path}: events file not found; check the path.")
        try:
            stream = path.open("r", encoding="utf-8-sig", errors="replace", newline=None)
        except OSError as exc:
            raise DataFileError(f"{path}: cannot be read ({exc.strerror}); check the path and "
                                f"its permissions.") from None
        name, interactive = str(path), piped
    hints_only = args.hints_only
    try:
        _loop(stream, name, interactive, watcher, out, err, args, hints_only, pseudo)
    except BrokenPipeError:  # the reader went away (e.g. '| head'): stop quietly
        try:
            sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - avoid a second error at exit
        except OSError:  # pragma: no cover
            pass
        return 0
    finally:
        if stream is not sys.stdin:
            stream.close()
    if args.summary:
        s = watcher.stats
        print("seqmine watch: summary: " + ", ".join(f"{k}={v}" for k, v in s.items()), file=err)
    return 0


def _loop(stream, name, interactive, watcher, out, err, args, hints_only, pseudo):
    """Read, process and write every line; bad events get one line on ``err``."""
    from ...detection.watcher import EventError
    for lineno, line in enumerate(stream, 1):
        if not line.strip():
            continue
        try:
            event = json.loads(line)
        except (ValueError, RecursionError) as exc:
            why = (json_problem(exc, line) if isinstance(exc, json.JSONDecodeError)
                   else "a number with too many digits" if isinstance(exc, ValueError)
                   else "nested too deeply")
            _say(err, f"seqmine watch: {name}:{lineno}: malformed JSON ({why}); event skipped")
            watcher.stats["events"] += 1
            watcher.stats["rejected"] += 1
            continue
        if pseudo is not None and isinstance(event, dict):
            for field in ("learner", "session"):
                if field in event:
                    event[field] = pseudo(event[field])
        try:
            firings = watcher.process(event)
        except EventError as exc:
            _say(err, f"seqmine watch: {name}:{lineno}: {exc}; event skipped")
            continue
        if watcher.notes:
            for note in watcher.notes:
                _say(err, f"seqmine watch: {name}:{lineno}: note: {note}")
            watcher.notes.clear()
        if firings:
            _write(out, firings, watcher, args.times, hints_only)
            if interactive:
                out.flush()
    watcher.flush()
    out.flush()


def _write(out, firings, watcher, times, hints_only):
    iso = watcher.time_kind == "iso" if times == "auto" else times == "iso"
    for f in firings:
        if hints_only and f.suppressed:
            continue
        record = f.to_dict(iso_times=iso, per_second=1 if iso else watcher.per_second)
        out.write(terminal_safe_json(json.dumps(record, ensure_ascii=False)) + "\n")


def _pseudonymizer(key_path):
    """learner or session -> pseudonym (as in the offline analysis); a JSON number gets
    the pseudonym of its text (``183`` like ``"183"``, as the offline loader reads both);
    other values pass unchanged, so the watcher rejects them exactly as it would without
    the option. An empty session stays empty ("no session")."""
    from ..._util.text import has_control_characters
    from ...inputs.privacy import pseudonymize_value, read_key

    key = read_key(key_path)
    cache = {}

    def convert(value):
        if type(value) is str:
            s = value.strip()
            if not s or has_control_characters(s):
                return value
        elif type(value) in (int, float):
            s = str(value)
        else:
            return value
        p = cache.get(s)
        if p is None:
            if len(cache) > 1_000_000:  # bound memory on endless streams
                cache.clear()
            p = cache[s] = pseudonymize_value(s, key)
        return p
    return convert


def json_problem(exc, line):
    """Why ``line`` is not JSON, with the column (1-based, in characters of the line as
    read, without its line end) where the parser stopped.

    Examples
    --------
    >>> import json
    >>> def why(line):
    ...     try:
    ...         json.loads(line)
    ...     except json.JSONDecodeError as exc:
    ...         return json_problem(exc, line)
    >>> why('{"learner": "a", "action": "x}')
    'unterminated string starting at column 28'
    >>> why('{"learner": "a", "action": "x\\n')
    'the line ends after column 29 before the JSON value is complete (truncated?)'
    >>> why('{"a" 1}')
    "expecting ':' delimiter at column 6"
    """
    text = line.rstrip("\r\n")
    if exc.pos >= len(text):
        return (f"the line ends after column {len(text)} before the JSON value is complete "
                f"(truncated?)")
    what = exc.msg[:-3] if exc.msg.endswith(" at") else exc.msg
    return f"{what[:1].lower() + what[1:]} at column {exc.pos + 1}"


def _say(err, message):
    print(terminal_safe(message), file=err)


def _idle(text):
    t = str(text).strip().lower()
    if t in ("none", "off"):
        return None
    try:
        v = float(t)
    except ValueError:
        raise ParameterError(f"--idle-timeout takes seconds or 'none'. Got {text!r} instead.") from None
    if not v > 0:
        raise ParameterError(f"--idle-timeout must be > 0 seconds or 'none'. Got {text!r} instead.")
    return v

