"""``benchlab ui``: the terminal app (the technician's bench loop, hands-free, library, sets and sink)."""

from __future__ import annotations

import argparse
import os
import signal
import threading
import sys

from benchlab.choices import DEFAULT_SESSIONS_DIR
from benchlab.commands._args import (add_sim_options, counting_number, library_option, operator_name, quantity,
                                     sim_settings)

_SIM_NAMES = ("fixture", "seed", "bag_size", "time_scale", "handling", "fault", "log")
IDLE_WAIT_S = 15.0  # on exit: longest wait for a running sweep's thread to switch off and end
EXIT_GRACE_S = 10.0  # after SIGTERM / SIGHUP: longest time the app may take to leave once the outputs are off


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "ui", parents=[library_option()], help="the terminal app: sweep parts one after another, hands-free, "
                                               "browse the library, pick sets, design a sink, thermal measurements",
        description="A keyboard-first terminal app. F1-F7 switch views (Bench, Characterize, Hands-free, Library, "
                    "Sets, Sink, Thermal); Ctrl+K aborts and switches every output off from any view; F10 lists "
                    "every key. Caution: a swept part and its heat sink can get hot enough to burn, and the Thermal "
                    "view heats the fixture block and the part well above room temperature; switch the output off "
                    "and let them cool before touching or changing a part.")
    where = p.add_mutually_exclusive_group()
    where.add_argument("--bench", metavar="CONFIG", help="bench file (TOML, see docs/bench-config.md)")
    where.add_argument("--sim", action="store_true", help="connect the built-in simulated bench at start")
    p.add_argument("--lot", default="lot-1", help="lot name of the parts swept (default lot-1)")
    p.add_argument("--sessions", metavar="DIR", default=DEFAULT_SESSIONS_DIR,
                   help=f"where sessions go (default ./{DEFAULT_SESSIONS_DIR})")
    p.add_argument("--points", type=counting_number, metavar="N", help="target points of each sweep (default 24)")
    p.add_argument("--max-current", type=quantity("A"), metavar="A", help="top target current (default 0.1 A)")
    add_sim_options(p, *_SIM_NAMES, title="simulated bench (--sim, or s in the Bench view)")
    p.set_defaults(func=run)


def options_from(args: argparse.Namespace):
    """The app's options from the command line (checked before the app starts)."""
    from benchlab.services.characterize import SimOptions, load_config
    from benchlab.sim.bench import SimConfig
    from benchlab.sim.faults import coerce_faults
    from benchlab.sweep.session import check_name
    from benchlab.tui.app import UiOptions

    check_name("lot name", args.lot)
    sim = None
    if args.sim or not args.bench:
        s = sim_settings(args, _SIM_NAMES)
        sim = SimOptions(fixture=s["fixture"], seed=s["seed"], bag_size=s["bag_size"], time_scale=s["time_scale"],
                         faults=tuple(s["fault"]), log_path=s["log"], handling_s=s["handling"])
        coerce_faults(sim.faults)
        SimConfig(fixture=sim.fixture, seed=sim.seed, bag_size=sim.bag_size, time_scale=sim.time_scale,
                  handling_s=sim.handling_s)
    if args.bench:
        load_config(args.bench)  # a bad bench file is one clear error before the app starts
    plan = {"points": args.points, "max_current_a": args.max_current}
    return UiOptions(bench_path=args.bench, sim=sim, library=args.library, lot=args.lot, sessions=args.sessions,
                     plan_options={k: v for k, v in plan.items() if v is not None},
                     connect_at_start=bool(args.sim or args.bench), operator=operator_name(args))


def run(args: argparse.Namespace) -> int:
    from benchlab.tui.app import BenchlabApp

    app = BenchlabApp(options_from(args))
    if args.bench:
        from benchlab.services.characterize import CAUTION

        print(CAUTION, file=sys.stderr)

    def stop(signum, frame):
        # SIGTERM, or SIGHUP when the terminal closes: outputs off first, then leave the app
        for sig in (signal.SIGTERM, signal.SIGHUP):
            signal.signal(sig, signal.SIG_IGN)
        app.stop_everything()
        app.exit(return_code=1)
        # With its terminal gone the app can stall restoring the screen; the outputs are already off and every
        # point is on disk, so the process may end for sure after a grace period.
        ender = threading.Timer(EXIT_GRACE_S, os._exit, args=(1,))
        ender.daemon = True
        ender.start()

    previous = {sig: signal.signal(sig, stop) for sig in (signal.SIGTERM, signal.SIGHUP)}
    try:
        app.run()
    finally:
        app.stop_everything()
        app.idle_event.wait(IDLE_WAIT_S)  # the sweep thread switches off and posts its end
        if app.handle is not None:
            app.handle.close()
        for sig, action in previous.items():
            signal.signal(sig, action)
    return app.return_code or 0
