"""``benchlab design sink|match|bin``: current-sink design, matched sets and VGS bins from the device library."""

from __future__ import annotations

import argparse

from benchlab.choices import POLARITIES, SERIES_NAMES
from benchlab.commands._args import (counting_number, json_option, library_option, name_options, print_json, quantity,
                                     refuse_given, whole_number)
from benchlab.errors import InputError


def _common() -> argparse.ArgumentParser:
    parent = argparse.ArgumentParser(add_help=False, parents=[library_option()])
    json_option(parent)
    return parent


INLINE_HELP = ('inline curve, no library needed: comma-separated key=value with vth and gm (linear), kp (square), '
               'kp+theta (theta) or kp+n[+theta] (ekv); optional label=NAME, model=NAME. Example (invented values): "vth=2.9,kp=1.6"')


def register(subparsers) -> None:
    """Add ``design`` with its ``sink``, ``match`` and ``bin`` actions to the CLI."""
    common = _common()
    parser = subparsers.add_parser("design", help="design current sinks, pick matched sets, bin parts by VGS",
                                   description="Design work on measured parts: current sinks (reference + outputs), "
                                               "matched sets and VGS bins. Every sink design prints its cautions.")
    sub = parser.add_subparsers(dest="design_command", metavar="ACTION", required=True)

    sink = sub.add_parser("sink", parents=[common], help="design (or analyse) a resistor-fed current sink / mirror",
                          description="A diode-connected reference part fed from the supply through a resistor; "
                                      "output parts share its gate voltage. With --at-current the resistor is designed "
                                      "(exact value, then the nearest preferred value, then everything recomputed); "
                                      "with --resistor the given circuit is analysed. Values accept SI prefixes "
                                      "(20m = 0.02).")
    sink.add_argument("--supply", type=quantity("V"), required=True, metavar="V", help="supply of the reference branch")
    what = sink.add_mutually_exclusive_group(required=True)
    what.add_argument("--at-current", type=quantity("A"), metavar="A",
                      help="reference current to design for (the resistor is chosen)")
    what.add_argument("--resistor", type=quantity("ohm"), metavar="OHMS", help="given resistor (analyse the circuit)")
    sink.add_argument("--ref", metavar="PART", help="reference part from the library (LABEL or LOT/LABEL)")
    sink.add_argument("--ref-model", metavar="TEXT", help="reference " + INLINE_HELP)
    sink.add_argument("--outputs-from", metavar="PART[,PART...]",
                      help="output parts from the library, comma-separated")
    sink.add_argument("--output-model", action="append", metavar="TEXT",
                      help="an output given inline (repeat for several); same syntax as --ref-model")
    sink.add_argument("--outputs", type=counting_number, metavar="N",
                      help="let the tool pick N outputs from the in-stock parts (and the reference too when --ref is "
                           "not given: the best matched set at the operating current)")
    sink.add_argument("--lot", help="pick parts only from this lot")
    sink.add_argument("--series", type=str.upper, choices=SERIES_NAMES, default="E24",
                      help="IEC 60063 series for resistors (default: %(default)s; E96 for 1 %% parts)")
    sink.add_argument("--load-voltage", type=quantity("V", "nonnegative"), metavar="V",
                      help="voltage across each output, for dissipation and compliance (default: the supply)")
    degen = sink.add_mutually_exclusive_group()
    degen.add_argument("--degeneration", type=quantity("ohm", "nonnegative"), metavar="OHMS", default=0.0,
                       help="resistor in every source (default: none)")
    degen.add_argument("--mismatch-target", type=quantity("%"), metavar="FRACTION",
                       help="find the smallest preferred source resistor that brings the worst mismatch under this "
                            "fraction (0.01 = 1 %%) and use it")
    sink.add_argument("--monte-carlo", type=whole_number, default=0, metavar="N",
                      help="Monte Carlo samples over resistor tolerance and fit errors (default: off)")
    sink.add_argument("--seed", type=whole_number, help="Monte Carlo seed, with --monte-carlo (default 1)")
    sink.add_argument("--tolerance", type=quantity("%", "nonnegative"), metavar="FRACTION",
                      help="resistor tolerance (default: 5 %% for E24, 1 %% for E96 ...)")
    sink.add_argument("--vth-tempco", type=quantity("V/K", "any"), default=-5e-3, metavar="V/K",
                      help="threshold temperature coefficient of parts without a measured one (default: %(default)s; "
                           "parts measured with 'benchlab thermal tempco' use their own)")
    sink.add_argument("--compliance-margin", type=quantity("V", "nonnegative"), default=0.2, metavar="V",
                      help="margin added to VGS - Vth in the compliance voltage (default: %(default)s)")
    sink.add_argument("--thermal-resistance", type=quantity("K/W"), metavar="K/W",
                      help="thermal resistance of each part without a measured one (default: the 62 K/W package "
                           "assumption): also solve the self-heated steady state (or report thermal runaway)")
    sink.add_argument("--heatsink", type=quantity("K/W", "nonnegative"), default=0.0, metavar="K/W",
                      help="heat sink added to every part's own thermal resistance; solves the self-heated steady "
                           "state with each part's Rth plus this")
    sink.add_argument("--spice", metavar="FILE", help="also write an ngspice netlist of the design (.op) to FILE")
    sink.add_argument("--save", action="store_true",
                      help="record the design in the library and reserve its parts")
    sink.set_defaults(func=_sink)

    match = sub.add_parser("match", parents=[common], help="pick matched sets from the in-stock parts",
                           description="Sets of one reference and N outputs whose currents agree best over the "
                                       "operating current (or range), using each part's whole fitted curve. Pairs "
                                       "are exactly optimal best-first; larger sets are a heuristic.")
    match.add_argument("--at-current", type=quantity("A"), required=True, metavar="A", help="operating current")
    match.add_argument("--at-current-max", type=quantity("A"), metavar="A",
                       help="top of the operating current range (from --at-current)")
    match.add_argument("--outputs", type=counting_number, required=True, metavar="N",
                       help="outputs per set, each set being one reference and N outputs (1 for a simple mirror)")
    match.add_argument("--lot", help="only parts of this lot")
    match.add_argument("--sets", type=counting_number, metavar="K",
                       help="how many sets (default: as many as possible)")
    match.add_argument("--polarity", choices=POLARITIES, default="N", help="which parts (default: %(default)s)")
    match.add_argument("--warm", type=quantity("K", "nonnegative"), default=0.0, metavar="K",
                       help="tempco as a criterion: also match with every part this many kelvin warmer, each with "
                            "its own measured threshold coefficient (default 0: off)")
    match.add_argument("--save", action="store_true",
                       help="record the best set as a design and reserve its parts (when another engineer takes one "
                            "of them first, the search runs again on what is left)")
    match.set_defaults(func=_match)

    bins = sub.add_parser("bin", parents=[common], help="bin the in-stock parts by VGS at an operating current")
    bins.add_argument("--at-current", type=quantity("A"), required=True, metavar="A", help="operating current")
    bins.add_argument("--width", type=quantity("V"), required=True, metavar="V", help="bin width (e.g. 20m)")
    bins.add_argument("--lot", help="only parts of this lot")
    bins.add_argument("--save", action="store_true", help="record the binning in the library")
    bins.set_defaults(func=_bin)


# phrases of the designer's errors -> the options a user typed
_SINK_OPTIONS = {"the target current": "--at-current", "the load voltage": "--load-voltage",
                 "the resistor tolerance": "--tolerance", "the mismatch target": "--mismatch-target",
                 "the number of Monte Carlo samples": "--monte-carlo", "the supply": "--supply"}


def _sink(args) -> int:
    try:
        return _design_sink(args)
    except InputError as exc:
        raise name_options(exc, _SINK_OPTIONS) from None


def _design_sink(args) -> int:
    from benchlab.design.sink import SinkOptions
    from benchlab.design.text import format_sink_report
    from benchlab.services import design as service

    if not args.monte_carlo:
        refuse_given(args, ["--seed"], "seeds the Monte Carlo run: it goes with --monte-carlo N")
    options = SinkOptions(series=args.series, load_voltage=args.load_voltage,
                          source_resistor_ohm=args.degeneration or 0.0, mismatch_target=args.mismatch_target,
                          compliance_margin_v=args.compliance_margin, vth_tempco=args.vth_tempco,
                          monte_carlo=args.monte_carlo, seed=1 if args.seed is None else args.seed,
                          resistor_tolerance=args.tolerance, thermal_resistance=args.thermal_resistance,
                          heatsink_k_per_w=args.heatsink)
    outputs_from = tuple(s.strip() for s in args.outputs_from.split(",") if s.strip()) if args.outputs_from else ()
    request = service.SinkRequest(supply=args.supply, current=args.at_current, resistor=args.resistor, ref=args.ref,
                                  out=outputs_from, outputs=args.outputs, ref_model=args.ref_model,
                                  out_models=tuple(args.output_model or ()), lot=args.lot, options=options,
                                  save=args.save)
    design, design_id = service.design_sink(request, args.library, spice_path=args.spice, operator=args.operator)
    if args.json:
        print_json(dict(design.to_dict(), design_id=design_id))
    else:
        if args.spice:
            print(f"wrote {args.spice}")
        print(format_sink_report(design, design_id), end="")
    return 0


# phrases of the matcher's errors -> the options a user typed
_MATCH_OPTIONS = {"the operating current": "--at-current", "the top of the current range": "--at-current-max",
                  "the warm step": "--warm"}
_BIN_OPTIONS = {"the operating current": "--at-current", "the bin width": "--width"}


def _match(args) -> int:
    try:
        return _match_sets(args)
    except InputError as exc:
        raise name_options(exc, _MATCH_OPTIONS) from None


def _match_sets(args) -> int:
    from benchlab.design.text import format_match
    from benchlab.services import design as service

    if args.save:
        if args.sets is not None:
            raise InputError("--save reserves the best set only; leave out --sets")
        reserved = service.reserve_match(args.library, args.at_current, args.outputs + 1,
                                         current_max=args.at_current_max, lot=args.lot, polarity=args.polarity,
                                         operator=args.operator)
        if args.json:
            print_json(reserved.to_dict())
            return 0
        for note in reserved.notes:
            print(note)
        print(format_match(reserved.result), end="")
        print(f"saved as design {reserved.design_id}; its parts are reserved")
        return 0
    result = service.match_parts(args.library, args.at_current, args.outputs + 1, current_max=args.at_current_max,
                                 lot=args.lot, count=args.sets, polarity=args.polarity, warm_k=args.warm)
    if args.json:
        print_json(result.to_dict())
    else:
        print(format_match(result, args.sets), end="")
    return 0


def _bin(args) -> int:
    try:
        return _bin_parts(args)
    except InputError as exc:
        raise name_options(exc, _BIN_OPTIONS) from None


def _bin_parts(args) -> int:
    from benchlab.design.text import format_bins
    from benchlab.services import design as service

    bins, binning_id = service.bin_parts(args.library, args.at_current, args.width, lot=args.lot, save=args.save)
    if args.json:
        print_json({"at_current": args.at_current, "width": args.width, "lot": args.lot, "binning_id": binning_id,
                    "bins": [b.to_dict() for b in bins]})
    else:
        print(format_bins(bins, args.at_current, args.width, binning_id), end="")
    return 0
