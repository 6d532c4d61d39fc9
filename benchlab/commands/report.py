"""``benchlab report``: an HTML report (index.html + PNG figures) of a lot and optionally one design."""

from __future__ import annotations

from benchlab.commands._args import library_option
from benchlab.services import report as service


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "report", parents=[library_option()], help="write an HTML report of a lot (and a design)",
        description="Write OUT/index.html with PNG figures: all sweeps on log current, histograms of threshold "
                    "and KP, KP against threshold with the design's parts marked, the design's operating point "
                    "on the reference part's curve, a table of parts and the cautions.")
    parser.add_argument("--lot", required=True, help="the lot to report on")
    parser.add_argument("--design", type=int, metavar="ID", help="a design recorded in the library")
    parser.add_argument("--out", required=True, metavar="DIR", help="report folder (created when missing)")
    parser.set_defaults(func=_report)


def _report(args) -> int:
    files = service.write_report(args.library, args.lot, args.out, args.design)
    print(f"wrote {files.index} and {len(files.figures)} figure(s)")
    return 0
