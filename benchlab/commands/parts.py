"""``benchlab parts``: add parts by hand, list, show, reject and change state."""

from __future__ import annotations

import argparse
import sys

from benchlab.choices import PART_STATES, POLARITIES
from benchlab.commands._args import json_option, library_option, print_json, quantity


def register(subparsers) -> None:
    lib = library_option()
    parser = subparsers.add_parser("parts", help="parts in the device library: add by hand, list, show, reject",
                                   description="Parts in the device library. Name a part as LABEL where the label is "
                                               "unique, else as LOT/LABEL.")
    sub = parser.add_subparsers(dest="parts_command", metavar="ACTION", required=True)

    add = sub.add_parser("add", parents=[lib], help="add a part, optionally with hand-entered model parameters "
                                                    "(--vth with --gm, or with --kp [--theta])")
    add.add_argument("label", help="label of the part, e.g. Q07 (unique within its lot)")
    add.add_argument("--lot", default="default", help="lot (bag) the part belongs to (default: %(default)s)")
    add.add_argument("--polarity", choices=POLARITIES, default="N", help="N- or P-channel (default: %(default)s)")
    add.add_argument("--vth", type=quantity("V", why="the threshold is entered as a magnitude, for N- and "
                                                  "P-channel parts alike"),
                     metavar="V", help="threshold voltage (its magnitude for P-channel parts)")
    add.add_argument("--gm", type=quantity("A/V"), metavar="A/V", help="transconductance of the linear model")
    add.add_argument("--kp", type=quantity("A/V2"), metavar="A/V2", help="KP of the square law (SPICE level-1, W=L=1)")
    add.add_argument("--theta", type=quantity("1/V", "nonnegative"), metavar="1/V",
                     help="mobility degradation THETA, with --kp")
    add.add_argument("--package", default="", help="package, e.g. TO-220")
    add.add_argument("--notes", default="", help="free text kept with the part")
    json_option(add, "the part")
    add.set_defaults(func=_add)

    lst = sub.add_parser("list", parents=[lib], help="list parts")
    lst.add_argument("--lot", help="only parts of this lot")
    lst.add_argument("--state", choices=PART_STATES + ("all",), default="in_stock",
                     help="only parts in this state (default: %(default)s)")
    json_option(lst, "each part")
    lst.set_defaults(func=_list)

    show = sub.add_parser("show", parents=[lib], help="show one part: curve, fits, sweeps, history")
    show.add_argument("part", help="LABEL or LOT/LABEL")
    json_option(show, "everything about the part")
    show.add_argument("--plot", metavar="FILE.png",
                      help="also draw the part: its latest stored sweep, the curve, the fitted threshold and VGS at "
                           "250 uA, and the residuals (.png, .pdf or .svg)")
    show.set_defaults(func=_show)

    reject = sub.add_parser("reject", parents=[lib], help="mark a part rejected")
    reject.add_argument("part", help="LABEL or LOT/LABEL")
    reject.add_argument("--reason", required=True, help="why (kept with the part)")
    json_option(reject, "the part")
    reject.set_defaults(func=_reject)

    state = sub.add_parser("state", parents=[lib], help="set a part's state")
    state.add_argument("part", help="LABEL or LOT/LABEL")
    state.add_argument("state", choices=PART_STATES, help="the new state")
    state.add_argument("--reason", help="note kept with the change (required for rejected)")
    json_option(state, "the part")
    state.set_defaults(func=_state)

    current = sub.add_parser("set-current", parents=[lib],
                             help="set the current a part will run at: its gm is stored there (without CURRENT: "
                                  "the library's default, benchlab library set-current)")
    current.add_argument("part", help="LABEL or LOT/LABEL")
    current.add_argument("current", nargs="?", type=quantity("A", "positive"), metavar="CURRENT",
                         help="operating current, e.g. 350mA")
    json_option(current, "the part")
    current.set_defaults(func=_set_current)


def _add(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    part = service.add_part(args.library, args.label, lot=args.lot, polarity=args.polarity, vth=args.vth,
                            gm=args.gm, kp=args.kp, theta=args.theta, package=args.package, notes=args.notes)
    if args.json:
        print_json(part.to_dict(), default=json_default)
    else:
        print(f"added {part.spec}" + (f" ({part.params.model} model)" if part.params else " (no curve yet)"))
    return 0


def _list(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    parts = service.list_parts(args.library, lot=args.lot, state=args.state)
    if args.json:
        print_json(*(p.to_dict() for p in parts), default=json_default)
    else:
        print(service.format_parts_table(parts))
    return 0


def _show(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    details = service.show_part(args.library, args.part)
    if args.plot:
        from benchlab.services.report import plot_part

        print(f"wrote {plot_part(args.library, args.part, args.plot)}", file=sys.stderr)
    if args.json:
        print_json(details, default=json_default)
    else:
        print(service.format_part_details(details))
    return 0


def _reject(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    part = service.set_state(args.library, args.part, "rejected", args.reason, operator=args.operator)
    if args.json:
        print_json(part.to_dict(), default=json_default)
    else:
        print(f"{part.spec}: rejected ({part.reason})")
    return 0


def _set_current(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    part = service.set_operating_current(args.library, args.part, args.current, operator=args.operator)
    if args.json:
        print_json(part.to_dict(), default=json_default)
    else:
        where = "its own" if part.operating_current is not None else "the library's default"
        gm = "not computed" if part.gm_op is None else f"{part.gm_op:.4g} A/V at {part.gm_current:.4g} A"
        print(f"{part.spec}: gm {gm} ({where} operating current)")
    return 0


def _state(args) -> int:
    from benchlab.library.records import json_default
    from benchlab.services import library as service

    part = service.set_state(args.library, args.part, args.state, args.reason, operator=args.operator)
    if args.json:
        print_json(part.to_dict(), default=json_default)
    else:
        print(f"{part.spec}: {part.state}")
    return 0
