"""``benchlab report``: a self-contained HTML report (figures embedded) of a lot and optionally one design."""

from __future__ import annotations

from benchlab.commands._args import json_option, library_option, print_json, whole_number


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "report", parents=[library_option()], help="write an HTML report of a lot (and a design)",
        description="Write OUT/index.html, one self-contained file (figures embedded) that can be mailed. With "
                    "--design it is the design's record: a summary (verdict against the target, resistors to buy, "
                    "worst error, cautions), a schematic with the chosen values, the design's tables, output "
                    "currents and errors, Monte Carlo histograms, each part's curve with its fit and residuals. "
                    "Always: the lot's sweeps (duds apart), spread of threshold and KP, statistics, a parts table, "
                    "bench and session details (instruments, fixture, operator, ambient, versions).")
    parser.add_argument("--lot", required=True, help="the lot to report on")
    parser.add_argument("--design", type=whole_number, metavar="ID", help="a design recorded in the library")
    parser.add_argument("--out", required=True, metavar="DIR", help="report folder (created when missing)")
    parser.add_argument("--pdf", metavar="FILE", help="also write the summary and every figure to this PDF")
    json_option(parser, "the files written")
    parser.set_defaults(func=_report)


def _report(args) -> int:
    from benchlab.services import report as service

    files = service.write_report(args.library, args.lot, args.out, args.design, pdf=args.pdf)
    if args.json:
        print_json({"index": str(files.index), "figures": [str(f) for f in files.figures],
                    "pdf": str(files.pdf) if files.pdf else None, "verdict": files.verdict})
        return 0
    print(f"wrote {files.index} ({len(files.figures)} figure(s) embedded)" + (f" and {files.pdf}" if files.pdf else ""))
    if files.verdict:
        print(files.verdict)
    return 0
