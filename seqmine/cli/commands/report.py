"""``seqmine report OUT_DIR``: re-render report.html from the files in an output folder."""

from __future__ import annotations

from ...errors import ParameterError
from ._options import OnOffAction, add_option

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "report"
HELP = "re-render report.html from the files in an output folder"
DESCRIPTION = (
    "Write OUT_DIR/report.html from the files a previous 'seqmine analyze' run left in "
    "OUT_DIR (summary.json, patterns.csv, transitions.csv, phases/, early_prediction.csv, "
    "detectors.json, examples.json). Sections whose file is missing say so. The page is "
    "self-contained: it opens offline and loads nothing from the network; its one script, "
    "the pattern explorer's, is allowed by its hash in the page's Content-Security-Policy."
)


def add_arguments(parser):
    """Options of ``seqmine report``."""
    parser.add_argument("out_dir", metavar="OUT_DIR", help="output folder of 'seqmine analyze'")
    add_option(parser, "report", "examples", action=OnOffAction,
               help="example excerpts from the log in the report (default: {default})")
    add_option(parser, "report", "max_patterns", type=int, metavar="N",
               help="differential patterns shown in detail (default: {default})")
    add_option(parser, "report", "explorer_rows", type=int, metavar="N",
               help="most patterns placed in the pattern explorer, the most reliable first; "
                    "patterns.csv has them all (default: {default})")


def run(args):
    """Render the report and print where it is."""
    from ...pipeline import rerun_stage, target_run_folder
    from ...reporting.render import render_report

    if args.max_patterns < 1:
        raise ParameterError(
            f"--max-patterns must be a whole number of at least 1. Got {args.max_patterns}.")
    if args.explorer_rows < 1:
        raise ParameterError(
            f"--explorer-rows must be a whole number of at least 1. Got {args.explorer_rows}.")
    folder = target_run_folder(args.out_dir)
    options = {"examples": args.examples, "max_patterns": args.max_patterns,
               "explorer_rows": args.explorer_rows}
    if folder is None:  # a folder without a run record: rendered from its files
        path = render_report(args.out_dir, **options)
    else:
        def work(st):
            page = render_report(st.path, **options)
            return {}, page.name

        name, target, _ = rerun_stage(folder, "report", NAME, work, settings=options)
        path = target / name
    if not args.quiet:
        print(f"Report written to {path}")
    return 0
