"""``benchlab demo``: sweep part of the invented demo bag on the simulated bench, started in process."""

from __future__ import annotations

import argparse
import sys
import time


def run_demo(args: argparse.Namespace) -> int:
    from benchlab.commands.sweep import ProgressBar
    from benchlab.services import characterize as svc

    print(svc.DEMO_STORY)
    print("The simulated bench starts on free loopback ports; nothing real is powered.\n")
    started = time.monotonic()
    result = svc.run_demo(args.sessions, count=args.count, seed=args.seed, on_event=ProgressBar(),
                          on_session=lambda p: print(f"session: {p}", file=sys.stderr))
    duds = [o for o in result.outcomes if o.classification != "good"]
    print(f"\n{len(result.outcomes)} parts swept in {time.monotonic() - started:.1f} s, "
          f"{len(duds)} set aside ({', '.join(f'{o.label} {o.classification}' for o in duds) or 'none'}).")
    print(f"Session (CSV per part + JSON sidecars): {result.session_path}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser("demo", help="try benchlab without hardware: sweep part of an invented bag",
                              description="Start the simulated bench in process and sweep parts of the invented "
                                          "demo bag (40 N-channel power MOSFETs for an LED-driver build) into a "
                                          "session.")
    p.add_argument("--sessions", metavar="DIR", default="sessions", help="where the session goes (default ./sessions)")
    p.add_argument("--count", type=int, default=12, help="parts to sweep (1-40, default 12)")
    p.add_argument("--seed", type=int, default=1, help="seed of the simulated bag (default 1)")
    p.set_defaults(func=run_demo)
