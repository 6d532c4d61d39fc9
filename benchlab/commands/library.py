"""``benchlab library``: import session records or a library export, list lots, show library facts."""

from __future__ import annotations

from benchlab.choices import MODEL_CHOICES
from benchlab.commands._args import json_option, library_option, print_json, quantity


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
    imp.add_argument("--model", default="auto", choices=MODEL_CHOICES,
                     help="model to re-fit with (default: %(default)s)")
    json_option(imp, "the import summary")
    imp.set_defaults(func=_import)

    imj = sub.add_parser("import-json", parents=[lib], help="import a library export (benchlab export json)")
    imj.add_argument("file", help="a JSON file written by benchlab export json")
    json_option(imj, "the counts imported")
    imj.set_defaults(func=_import_json)

    lots = sub.add_parser("lots", parents=[lib], help="list lots with part counts per state")
    json_option(lots, "each lot")
    lots.set_defaults(func=_lots)

    refit = sub.add_parser("refit", parents=[lib], help="re-fit every stored sweep with the current fitter",
                           description="Fit each part's newest good stored sweep again (after a fitter update), in "
                                       "batches, and store the new fit as its current curve in one transaction; "
                                       "older fits stay in the part's history. Parts without a fittable sweep are "
                                       "listed and left as they are.")
    refit.add_argument("--lot", help="only this lot's parts")
    refit.add_argument("--model", default="auto", choices=MODEL_CHOICES,
                       help="model to fit (default: %(default)s)")
    json_option(refit, "the parts re-fitted and left")
    refit.set_defaults(func=_refit)

    info = sub.add_parser("info", parents=[lib], help="backend, library file or URL, schema version and row counts")
    json_option(info, "the facts")
    info.set_defaults(func=_info)

    copy = sub.add_parser("copy", help="copy a whole library to an empty one (SQLite <-> PostgreSQL), verified",
                          description="Copy every lot, part, sweep, fit, design, binning and state change of SOURCE "
                                      "into DESTINATION (which must be empty; a new file is created), keeping ids, "
                                      "in one transaction; then read it back and compare row counts and SHA-256 "
                                      "checksums table by table. On any mismatch nothing is kept.")
    copy.add_argument("source", metavar="SOURCE", help="library file or postgresql:// URL to copy from")
    copy.add_argument("destination", metavar="DESTINATION", help="empty library file or postgresql:// URL")
    json_option(copy, "the verification")
    copy.set_defaults(func=_copy)

    current = sub.add_parser("set-current", parents=[lib],
                             help="set the library's default operating current: gm of every part without its own "
                                  "(benchlab parts set-current) is stored there")
    current.add_argument("current", type=quantity("A", "positive"), metavar="CURRENT", help="e.g. 350mA")
    json_option(current, "the setting and the parts updated")
    current.set_defaults(func=_set_current)


def _set_current(args) -> int:
    from benchlab.services import library as service

    updated = service.set_default_current(args.library, args.current, operator=args.operator)
    if args.json:
        print_json({"operating_current": args.current, "fits_updated": updated})
    else:
        print(f"default operating current {args.current:g} A; gm stored there for {updated} part(s)")
    return 0


def _import(args) -> int:
    from benchlab.services import library as service

    summary = service.import_sessions(args.library, args.sessions, lot=args.lot, refit=args.refit, model=args.model,
                                      operator=args.operator)
    if args.json:
        print_json(summary.to_dict())
        return 0
    for sweep in summary.sweeps:
        print(f"{sweep.lot}/{sweep.label:<12} {sweep.action:<9} {sweep.detail}")
    print(f"{len(summary.sweeps)} sweep(s): {summary.fitted} fitted, {summary.rejected} rejected, "
          f"{summary.count('stored')} stored without fit, {summary.skipped} already in the library")
    return 0


def _refit(args) -> int:
    from benchlab.services import library as service

    summary = service.refit(args.library, lot=args.lot, model=args.model, operator=args.operator)
    if args.json:
        print_json(summary.to_dict())
        return 0
    for part, line in summary.refitted:
        print(f"{part:<20} {line}")
    for part, why in summary.unchanged:
        print(f"{part:<20} unchanged: {why}")
    print(f"{len(summary.refitted)} part(s) re-fitted with fitter {summary.fitter_version} ({summary.model}), "
          f"{len(summary.unchanged)} left as they were")
    return 0


def _import_json(args) -> int:
    from benchlab.services import library as service

    counts = service.import_json_file(args.library, args.file)
    if args.json:
        print_json(counts)
        return 0
    print("imported " + ", ".join(f"{n} {k}" for k, n in counts.items()))
    return 0


def _lots(args) -> int:
    from benchlab.services import library as service

    lots = service.lots(args.library)
    if args.json:
        print_json(*lots)
        return 0
    print(f"{'LOT':<24} {'PARTS':>5} {'IN_STOCK':>8} {'RESERVED':>8} {'USED':>5} {'REJECTED':>8}")
    for lot in lots:
        print(f"{lot['name']:<24} {lot['parts']:>5} {lot['in_stock']:>8} {lot['reserved']:>8} {lot['used']:>5} "
              f"{lot['rejected']:>8}")
    return 0


def _copy(args) -> int:
    from benchlab.services import library as service

    report = service.copy_library(args.source, args.destination)
    if args.json:
        print_json(report.to_dict())
        return 0
    print(f"copied {report.source} -> {report.destination}")
    for t in report.tables:
        print(f"  {t.table:<14} {t.rows:>9} rows  sha256 {t.checksum[:16]}  "
              f"{'verified' if t.verified else 'MISMATCH'}")
    print("every table verified: same row counts and checksums on both sides")
    return 0


def _info(args) -> int:
    from benchlab.services import library as service

    facts = service.info(args.library)
    if args.json:
        print_json(facts, default=str)
        return 0
    for key, value in facts.items():
        print(f"{key}: {value}")
    return 0
