"""``benchlab library``: import session records or a library export, list lots, show library facts."""

from __future__ import annotations

import json

from benchlab.commands._args import library_option
from benchlab.services import library as service


def register(subparsers) -> None:
    lib = library_option()
    parser = subparsers.add_parser("library", help="device library: import sessions or an export, lots, info")
    sub = parser.add_subparsers(dest="library_command", metavar="ACTION", required=True)

    imp = sub.add_parser("import", parents=[lib], help="import session folders (re-fitting each good sweep)",
                         description="Store every sweep of the session folders with its raw points, re-fit each "
                                     "good sweep and store the fit; duds are stored as rejected with their "
                                     "classification as the reason. All folders go in one transaction.")
    imp.add_argument("sessions", nargs="+", metavar="SESSION_DIR",
                     help="a session folder, or a folder of them (e.g. ./sessions)")
    imp.add_argument("--lot", help="store the parts in this lot (default: the session's lot)")
    imp.add_argument("--no-refit", dest="refit", action="store_false",
                     help="use the fits stored in the session instead of fitting again")
    imp.add_argument("--model", default="auto", choices=("auto", "linear", "square", "theta", "ekv"),
                     help="model to re-fit with (default: %(default)s)")
    imp.add_argument("--json", action="store_true", help="print the import summary as JSON")
    imp.set_defaults(func=_import)

    imj = sub.add_parser("import-json", parents=[lib], help="import a library export (benchlab export json)")
    imj.add_argument("file", help="a JSON file written by benchlab export json")
    imj.set_defaults(func=_import_json)

    lots = sub.add_parser("lots", parents=[lib], help="list lots with part counts per state")
    lots.add_argument("--json", action="store_true", help="print the lots as one JSON array")
    lots.set_defaults(func=_lots)

    info = sub.add_parser("info", parents=[lib], help="library file, schema version and row counts")
    info.set_defaults(func=_info)


def _import(args) -> int:
    summary = service.import_sessions(args.library, args.sessions, lot=args.lot, refit=args.refit, model=args.model,
                                      operator=args.operator)
    if args.json:
        print(json.dumps(summary.to_dict()))
        return 0
    for sweep in summary.sweeps:
        print(f"{sweep.lot}/{sweep.label:<12} {sweep.action:<9} {sweep.detail}")
    print(f"{len(summary.sweeps)} sweep(s): {summary.fitted} fitted, {summary.rejected} rejected, "
          f"{summary.count('stored')} stored without fit, {summary.skipped} already in the library")
    return 0


def _import_json(args) -> int:
    counts = service.import_json_file(args.library, args.file)
    print("imported " + ", ".join(f"{n} {k}" for k, n in counts.items()))
    return 0


def _lots(args) -> int:
    lots = service.lots(args.library)
    if args.json:
        print(json.dumps(lots))
        return 0
    print(f"{'LOT':<24} {'PARTS':>5} {'IN_STOCK':>8} {'RESERVED':>8} {'USED':>5} {'REJECTED':>8}")
    for lot in lots:
        print(f"{lot['name']:<24} {lot['parts']:>5} {lot['in_stock']:>8} {lot['reserved']:>8} {lot['used']:>5} "
              f"{lot['rejected']:>8}")
    return 0


def _info(args) -> int:
    for key, value in service.info(args.library).items():
        print(f"{key}: {value}")
    return 0
