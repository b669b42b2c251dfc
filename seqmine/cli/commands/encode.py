"""``seqmine encode``: events + outcomes -> a SequenceDB folder, rejects and a summary."""

from __future__ import annotations

import json
from pathlib import Path

from ..._util.csvio import write_csv
from . import _options

NAME = "encode"
HELP = "load and validate events and outcomes, encode them as sequences"
DESCRIPTION = ("Load the event log and outcomes, reject unusable rows (written to "
               "rejects.csv with reasons), form outcome groups and encode each learner's "
               "events as a symbol sequence with pause tokens. Writes OUT/sequences/, "
               "OUT/rejects.csv and OUT/summary.json.")


def add_arguments(p):
    p.add_argument("events", metavar="EVENTS", help="event log (CSV, TSV, Parquet, JSONL or xAPI JSON)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    _options.add_event_options(p)
    _options.add_outcome_options(p)
    _options.add_encoding_options(p)
    _options.add_privacy_option(p)


def run(args):
    from ..._util.warnlog import collect_warnings
    from ...pipeline import prepare_sequences, warnings_frame
    out = Path(args.out)
    with collect_warnings() as log:
        loaded, outcomes = _options.pseudonymize_inputs(
            args, _options.events_from_args(args, args.events), _options.outcomes_from_args(args))
        prepared = prepare_sequences(
            loaded, outcomes,
            grouping_factory=lambda o: _options.grouping_from_args(args, o),
            encoder=_options.encoder_from_args(args))
    out.mkdir(parents=True, exist_ok=True)
    prepared.db.save(out / "sequences")
    write_csv(prepared.rejects, out / "rejects.csv")
    summary = dict(prepared.summary, warnings=log.as_list())
    (out / "summary.json").write_text(json.dumps(summary, indent=2, sort_keys=True) + "\n",
                                      encoding="utf-8")
    if not args.quiet:
        s = prepared.summary
        print(f"encoded {s['sequences']} sequences ({s['tokens']} tokens) from "
              f"{s['rows_kept']} of {s['rows_in']} rows; {s['rows_rejected']} rejected -> {out}")
    _options.print_warnings(warnings_frame(log))
    return 0
