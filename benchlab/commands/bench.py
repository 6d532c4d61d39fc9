"""``benchlab bench``: check a bench (connect, identify, round-trip a harmless setting) and list profiles."""

from __future__ import annotations

import argparse

from benchlab.commands._args import add_sim_options, json_option, print_json, refuse_given, sim_settings
from benchlab.errors import InputError

_CHECK_DESCRIPTION = """\
Connect every instrument of a bench, identify it (*IDN?), clear its status (*CLS), then with the
output OFF set a harmless value and query it back (supply: 0 V setpoint and the bench's current
limit; meter: DC volts at the bench's NPLC; source-measure unit: current compliance, 0 V level,
NPLC) and read the instrument's error queue. No output is ever enabled; an instrument whose output
is found on is reported and left untouched.

Give a bench file (TOML, see docs/bench-config.md), or --sim to start the built-in simulated bench
in this process and check it. Exit status: 0 when every instrument passed, 1 when a check failed,
2 when the bench file is invalid or an instrument does not answer.
"""

_PROFILES_DESCRIPTION = """\
List the instrument profiles benchlab can use, searched in this order (a later folder overrides an
earlier one by name): the bundled drivers, <user config dir>/benchlab/drivers, then each folder in
BENCHLAB_DRIVERS (separated like PATH). Each file is validated; an unusable one shows its error.
See docs/profiles.md to write a profile for your own instrument.
"""


def register(subparsers) -> None:
    """Add `benchlab bench check` and `benchlab bench profiles` to the CLI."""
    parser = subparsers.add_parser("bench", help="check a bench's instruments; list instrument profiles",
                                   description="Instrument bench: check the connection to each instrument "
                                               "and list the instrument profiles on the search path.")
    sub = parser.add_subparsers(dest="bench_command", metavar="ACTION", required=True)

    check = sub.add_parser("check", help="connect, identify and round-trip each instrument (outputs stay off)",
                           description=_CHECK_DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    check.add_argument("config", nargs="?", metavar="CONFIG", help="bench file (TOML)")
    check.add_argument("--sim", action="store_true",
                       help="start the built-in simulated bench in this process and check it (no CONFIG)")
    add_sim_options(check, "fixture", title="simulated bench (with --sim)")
    json_option(check, "the report")
    check.set_defaults(func=_check)

    profiles = sub.add_parser("profiles", help="list instrument profiles and where they come from",
                              description=_PROFILES_DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    json_option(profiles, "each profile")
    profiles.set_defaults(func=_profiles)


def _check(args) -> int:
    from benchlab.services import bench as service

    if args.sim and args.config:
        raise InputError("give either a bench file or --sim, not both")
    if args.sim:
        report = service.check_simulator_bench(sim_settings(args, ["fixture"])["fixture"])
    elif args.config:
        refuse_given(args, ["--sim-fixture"], "sets up the simulated bench: it goes with --sim, not with a bench "
                                              "file (whose fixture is in the file)")
        report = service.check_bench_file(args.config)
    else:
        raise InputError("give a bench file (see docs/bench-config.md) or --sim for the built-in simulated bench")
    if args.json:
        print_json(report.to_dict())
    else:
        print(service.format_check_report(report))
    return 0 if report.ok else 1


def _profiles(args) -> int:
    from benchlab.services import bench as service

    search_path, entries = service.list_profiles()
    if args.json:
        print_json(*(dict(entry.to_dict(), search_path=search_path) for entry in entries))
        return 0
    print("search path (later overrides earlier):")
    for folder in search_path:
        print(f"  {folder}")
    for entry in entries:
        what = f"{entry.role}: {entry.description}" if entry.problem is None else f"UNUSABLE: {entry.problem}"
        print(f"{entry.name:28s} {what}\n{'':28s} {entry.path}")
    return 0
