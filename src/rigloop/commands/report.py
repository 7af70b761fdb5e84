"""``rigloop report SESSION [SESSION2] [--band PCT] [--run N] [--png FILE] [--svg FILE] [--json]``.

Prints the report of a recorded session (docs/reports.md), or the comparison of two sessions
(B − A). Exit codes: 0 report printed, 2 a session folder or an output file could not be used.
A failed test plan is part of the report, not an error of the command: it still exits 0.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from rigloop.exit_codes import EXIT_OK, EXIT_USAGE

NAME = "report"
HELP = ("summarise a recorded session — transitions, tracking error, actuator effort, loop "
        "timing, trips, test-plan verdicts — or compare two sessions")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("session", metavar="SESSION", help="session folder (under recording.dir)")
    parser.add_argument("session_b", metavar="SESSION2", nargs="?", default=None,
                        help="a second session: print both side by side with B − A differences")
    parser.add_argument("--band", metavar="PCT", type=float, default=None,
                        help="settling band, percent of each change (default: the plan's, "
                             "else 2); widened where the output's noise is larger")
    parser.add_argument("--run", metavar="N", type=int, default=None,
                        help="report run N of the session alone (each ARM … stop is a run)")
    parser.add_argument("--png", metavar="FILE", help="write the figure as a PNG image")
    parser.add_argument("--svg", metavar="FILE", help="write the figure as an SVG drawing")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object instead of the text report")


def run(args: argparse.Namespace) -> int:
    from rigloop.analysis.report import analyse, comparison_dict, to_json
    from rigloop.analysis.report_text import render_comparison, render_text
    from rigloop.analysis.session import SessionError, load_session

    for target in (args.png, args.svg):
        if target and not Path(target).resolve().parent.is_dir():
            print(f"rigloop report: cannot write the figure to {target}: the folder "
                  f"{Path(target).resolve().parent} does not exist; create it first",
                  file=sys.stderr)
            return EXIT_USAGE
    band = None
    if args.band is not None:
        if not 0.0 < args.band < 100.0:
            print(f"rigloop report: --band {args.band:g}: give the settling band as a percentage "
                  f"of the change between 0 and 100 (exclusive), e.g. --band 2", file=sys.stderr)
            return EXIT_USAGE
        band = args.band / 100.0
    if args.run is not None and args.session_b:
        print("rigloop report: --run picks a run of one session; give one SESSION with --run, "
              "or compare two sessions without it", file=sys.stderr)
        return EXIT_USAGE
    paths = [args.session] + ([args.session_b] if args.session_b else [])
    try:
        analyses = [analyse(load_session(p), band=band, run=args.run) for p in paths]
    except (SessionError, ValueError) as exc:
        print(f"rigloop report: {exc}", file=sys.stderr)
        return EXIT_USAGE

    if args.json:
        data = analyses[0].as_dict() if len(analyses) == 1 else comparison_dict(*analyses)
        print(to_json(data))
    else:
        text = render_text(analyses[0]) if len(analyses) == 1 else render_comparison(*analyses)
        print(text, end="")

    if args.png or args.svg:
        from rigloop.analysis.figures import save_figure

        try:
            written = save_figure(analyses, png=args.png, svg=args.svg)
        except OSError as exc:
            target = getattr(exc, "filename", None) or args.png or args.svg
            print(f"rigloop report: cannot write the figure to {target} ({exc.strerror or exc}); "
                  f"check that the folder exists and is writable", file=sys.stderr)
            return EXIT_USAGE
        info = sys.stderr if args.json else sys.stdout
        for path in written:
            print(f"figure written: {path}", file=info)
    return EXIT_OK
