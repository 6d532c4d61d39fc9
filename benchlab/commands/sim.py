"""``benchlab sim``: run the simulated bench (three SCPI instruments on TCP) in the foreground."""

from __future__ import annotations

import argparse

from benchlab.choices import SIM_FIRST_PORT
from benchlab.commands._args import add_sim_options, sim_settings, whole_number

# A foreground simulator never reads its own log back (--sim-log FILE keeps everything): bound the memory it uses.
CLI_LOG_MEMORY_ENTRIES = 100_000
_SIM_NAMES = ("fixture", "seed", "bag_size", "time_scale", "latency", "resistor", "handling", "fault", "log")


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
            "demo. The --sim-* settings are spelled and default the same as on sweep, bag and bench check. "
            "Command set: docs/scpi.md; physics, defaults and faults: docs/sim.md."
        ),
    )
    parser.add_argument("--host", default="127.0.0.1",
                        help="address to listen on (default 127.0.0.1, loopback only)")
    parser.add_argument("--port", type=whole_number, default=SIM_FIRST_PORT,
                        help=f"port of the supply; meter and SMU take the next two; 0 picks free ports "
                             f"(default {SIM_FIRST_PORT})")
    add_sim_options(parser, *_SIM_NAMES)
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Build the configuration from the arguments and serve until a signal."""
    from benchlab.sim.bench import SimConfig
    from benchlab.sim.faults import parse_fault
    from benchlab.sim.runner import serve_until_signalled

    sim = sim_settings(args, _SIM_NAMES)
    faults = tuple(parse_fault(text) for text in sim["fault"])
    config = SimConfig(
        fixture=sim["fixture"], seed=sim["seed"], bag_size=sim["bag_size"], time_scale=sim["time_scale"],
        latency_s=sim["latency"], faults=faults, series_resistor_nominal_ohm=sim["resistor"], log_path=sim["log"],
        log_memory_entries=CLI_LOG_MEMORY_ENTRIES, handling_s=sim["handling"],
    )
    return serve_until_signalled(config, args.host, args.port)


__all__ = ["register", "run"]
