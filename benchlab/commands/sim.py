"""``benchlab sim``: run the simulated bench (three SCPI instruments on TCP) in the foreground."""

from __future__ import annotations

import argparse

from benchlab.sim.bag import DEFAULT_BAG_SIZE
from benchlab.sim.bench import DEFAULT_FIRST_PORT, DEFAULT_SERIES_RESISTOR_OHM, SimConfig
from benchlab.sim.faults import parse_fault
from benchlab.kinds import Fixture

# A foreground simulator never reads its own log back (--log FILE keeps everything): bound the memory it uses.
CLI_LOG_MEMORY_ENTRIES = 100_000

_FAULT_HELP = (
    "inject a fault, KIND[@ROLE][=VALUE]; ROLE is supply, meter, smu or all (default). "
    "Kinds: slow=S[/N] (replies S seconds late, after N messages), mute=N (no replies after N messages), hang=N (neither "
    "executes nor replies after N messages), drop=N (connection closed at message N), "
    "error=HEADER[/CODE] (that command refused with CODE, default -240), garble=N (N-th reply garbled), "
    "open=N / short=N (the part fails open / short after N readings), pull=N (the operator pulls the N-th part "
    "out in the middle of its sweep; with --handling). Repeat for several."
)


def register(subparsers) -> None:
    """Add the ``sim`` subcommand."""
    parser = subparsers.add_parser(
        "sim",
        help="run the simulated bench (SCPI supply, meter and SMU on TCP) until Ctrl-C",
        description=(
            "Serve a simulated bench: a one-channel supply, a DC multimeter and a source-measure unit, "
            "each a raw SCPI socket on its own TCP port (the supply on --port, then the next two), around "
            "a bag of simulated N-channel MOSFETs wired diode-connected. Prints one line per instrument, "
            "'ROLE RESOURCE', then serves until SIGINT or SIGTERM. Every part and value is invented for the "
            "demo. Command set: docs/scpi.md; physics, defaults and faults: docs/sim.md."
        ),
    )
    parser.add_argument("--host", default="127.0.0.1",
                        help="address to listen on (default 127.0.0.1, loopback only)")
    parser.add_argument("--port", type=int, default=DEFAULT_FIRST_PORT,
                        help=f"port of the supply; meter and SMU take the next two; 0 picks free ports "
                             f"(default {DEFAULT_FIRST_PORT})")
    parser.add_argument("--fixture", choices=tuple(Fixture), default=Fixture.RESISTOR,
                        help="resistor: supply -> series resistor -> part, meter across the part; "
                             "smu: SMU straight across the part (default resistor)")
    parser.add_argument("--seed", type=int, default=1, help="seed of the bag, errors and noise (default 1)")
    parser.add_argument("--bag-size", type=int, default=DEFAULT_BAG_SIZE,
                        help=f"number of parts in the bag, labelled Q01... (default {DEFAULT_BAG_SIZE})")
    parser.add_argument("--time-scale", type=float, default=1.0,
                        help="real seconds slept per nominal second of instrument time: 1 real time, "
                             "0.001 fast, 0 no sleeping (default 1)")
    parser.add_argument("--latency", type=float, default=0.0, metavar="S",
                        help="extra real delay per message in seconds, like a LAN (default 0)")
    parser.add_argument("--resistor", type=float, default=DEFAULT_SERIES_RESISTOR_OHM, metavar="OHM",
                        help=f"nominal series resistor of the resistor fixture (default {DEFAULT_SERIES_RESISTOR_OHM:g})")
    parser.add_argument("--handling", type=float, default=0.0, metavar="SECONDS",
                        help="simulate an operator: when the output goes off after a sweep the part is taken out "
                             "(the fixture is empty), and the next part of the bag is seated SECONDS later "
                             "(default 0: no operator, parts change on SIMulation:PART:NEXT)")
    parser.add_argument("--fault", action="append", default=[], metavar="SPEC", help=_FAULT_HELP)
    parser.add_argument("--log", metavar="FILE",
                        help="append every command and output change to FILE as JSON lines, flushed per entry")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Build the configuration from the arguments and serve until a signal."""
    from benchlab.sim.runner import serve_until_signalled

    faults = tuple(parse_fault(text) for text in args.fault)
    config = SimConfig(
        fixture=args.fixture, seed=args.seed, bag_size=args.bag_size, time_scale=args.time_scale,
        latency_s=args.latency, faults=faults, series_resistor_nominal_ohm=args.resistor, log_path=args.log,
        log_memory_entries=CLI_LOG_MEMORY_ENTRIES, handling_s=args.handling,
    )
    return serve_until_signalled(config, args.host, args.port)


__all__ = ["register", "run"]
