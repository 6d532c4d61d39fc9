"""``benchlab export csv|json|spice``: the library (or a filtered view) as files others can read."""

from __future__ import annotations

from benchlab.choices import PART_STATES
from benchlab.commands._args import library_option, whole_number
from benchlab.errors import InputError


def register(subparsers) -> None:
    lib = library_option()
    parser = subparsers.add_parser("export", help="export the library as CSV or JSON, or parts as SPICE model cards")
    sub = parser.add_subparsers(dest="export_command", metavar="FORMAT", required=True)
    for name, text in (("csv", "one row per part with its latest curve"),
                       ("json", "everything: parts, sweeps with points, fits, designs (re-importable)")):
        fmt = sub.add_parser(name, parents=[lib], help=text)
        fmt.add_argument("--lot", help="only this lot")
        fmt.add_argument("--state", choices=PART_STATES + ("all",), default="all",
                         help="only parts in this state (default: %(default)s)")
        fmt.add_argument("--out", metavar="FILE", help="write here instead of standard output")
        fmt.set_defaults(func=_csv if name == "csv" else _json)
    spice = sub.add_parser("spice", parents=[lib], help="SPICE .model cards, one per part, named by label",
                           description="SPICE .model cards, one per part, named by label (level 1 with VTO and KP; "
                                       "level 3 with THETA when the part was fitted with it); with --design also "
                                       "the ngspice netlist (.op) of a current sink recorded in the library.")
    spice.add_argument("parts", nargs="*", metavar="PART", help="LABEL or LOT/LABEL")
    spice.add_argument("--design", type=whole_number, metavar="ID",
                       help="also write the netlist of this recorded sink design (benchlab design sink --save)")
    spice.add_argument("--out", metavar="FILE", help="write here instead of standard output")
    spice.set_defaults(func=_spice)


def _emit(text: str, out: str | None) -> int:
    from benchlab.services import library as service

    rest = service.write_output(text, out)
    if rest is not None:
        print(rest, end="")
    else:
        print(f"wrote {out}")
    return 0


def _csv(args) -> int:
    from benchlab.services import library as service

    return _emit(service.export_csv_text(args.library, lot=args.lot, state=args.state), args.out)


def _json(args) -> int:
    from benchlab.services import library as service

    return _emit(service.export_json_text(args.library, lot=args.lot, state=args.state), args.out)


def _spice(args) -> int:
    if not args.parts and args.design is None:
        raise InputError("name at least one part to export, or a recorded design with --design ID")
    from benchlab.services import library as service

    texts = []
    if args.parts:
        texts.append(service.export_spice_text(args.library, args.parts))
    if args.design is not None:
        from benchlab.services.design import recorded_sink_netlist

        from benchlab.design.spice import model_names_in

        texts.append(recorded_sink_netlist(args.library, args.design, model_names_in("\n".join(texts))))
    return _emit("\n".join(texts), args.out)
