"""``seqmine encode``: events + outcomes -> a SequenceDB folder, rejects and a summary."""

from __future__ import annotations

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
    from ..._util.jsonio import write_json
    from ..._util.outdir import writing_folder
    from ..._util.runrecord import RunRecord, file_input, new_files, snapshot
    from ..._util.warnlog import collect_warnings
    from ...inputs.privacy import key_fingerprint, read_key
    from ...inputs.sources import STDIN, STDIN_NAME, regular_input
    from ...pipeline import prepare_sequences, recorded_names, warnings_frame

    out = Path(args.out)
    key = read_key(args.pseudonymize) if args.pseudonymize else None
    with writing_folder(out, "--out", inputs=[args.events, args.outcomes, args.mapping,
                                              args.pseudonymize],
                        owned=recorded_names(out)) as st, \
            regular_input(args.events, "events", max_bytes=args.max_bytes) as ev, \
            regular_input(args.outcomes, "outcomes") as oc, collect_warnings() as log:
        record = RunRecord(NAME)
        before = snapshot(st.path)
        loaded, outcomes = _options.pseudonymize_inputs(
            args, _options.events_from_args(args, ev[0]), _options.outcomes_from_args(args, oc[0]))
        inputs = {role: file_input(pair[0], STDIN if pair[1] == STDIN_NAME else pair[1])
                  for role, pair in (("events", ev), ("outcomes", oc))}
        write_csv(loaded.rejects, st.path / "rejects.csv")
        record.done("load", settings={"privacy": {
            "pseudonymized": key is not None,
            "key_fingerprint": key_fingerprint(key) if key is not None else None}},
            inputs=inputs, outputs=new_files(st.path, before))
        before = snapshot(st.path)
        encoder = _options.encoder_from_args(args)
        prepared = prepare_sequences(
            loaded, outcomes,
            grouping_factory=lambda o: _options.grouping_from_args(args, o),
            encoder=encoder)
        prepared.db.save(st.path / "sequences")
        record.done("encode", settings=encoder.get_params() | {
            "mapping": args.mapping, "grouping": prepared.grouping.rule},
            inputs={"load": {"stage": "load"}}, outputs=new_files(st.path, before))
        summary = dict(prepared.summary, pseudonymized=key is not None, warnings=log.as_list())
        write_json(st.path / "summary.json", record.apply(summary))
    if not args.quiet:
        s = prepared.summary
        print(f"encoded {s['sequences']} sequences ({s['tokens']} tokens) from "
              f"{s['rows_kept']} of {s['rows_in']} rows; {s['rows_rejected']} rejected -> {out}")
    _options.print_warnings(warnings_frame(log))
    return 0
