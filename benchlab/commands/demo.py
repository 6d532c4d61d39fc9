"""``benchlab demo``: the whole main job on the simulated bench, started in process.

Sweeps the invented demo bag, fits and stores every part, picks a matched set, designs the
current sink, exports SPICE cards and writes the report, all into one new run folder.
"""

from __future__ import annotations

import argparse
import sys
import time


def run_demo(args: argparse.Namespace) -> int:
    from benchlab.commands.sweep import ProgressBar
    from benchlab.services import characterize, demo

    print(characterize.DEMO_STORY)
    print("The simulated bench starts on free loopback ports; nothing real is powered.\n")
    started = time.monotonic()
    run = demo.run_full_demo(args.out, count=args.count, seed=args.seed, on_event=ProgressBar())
    print(f"\nDone in {time.monotonic() - started:.1f} s: {run.swept} parts swept, {run.fitted} fitted, "
          f"{run.rejected} set aside. Everything is in {run.folder}:")
    for what, path in (("session (CSV + JSON per part)", run.session), ("device library (SQLite)", run.library),
                       ("SPICE model cards", run.models), ("sink netlist (ngspice -b)", run.netlist),
                       ("report", run.report)):
        print(f"  {what:31} {path}")
    print("Next: benchlab parts list --library", run.library, file=sys.stderr)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "demo", help="try the whole job without hardware, on the simulated bench",
        description="Start the simulated bench in process and run the main job on an invented scenario (a workshop "
                    "building an 8-channel constant-current LED driver for a plant-growing rack): sweep the bag of "
                    "N-channel power MOSFETs, fit and store every part, pick a matched set of 1 + 8, design the "
                    "sink (resistor, currents, compliance, dissipation, cautions), export SPICE cards and write "
                    "an HTML report. Everything goes into a new run folder under --out.")
    p.add_argument("--out", metavar="DIR", default="benchlab-demo",
                   help="folder that receives a new run-<time> folder (default ./benchlab-demo)")
    p.add_argument("--count", type=int, default=40, help="parts of the 40-part bag to sweep (9-40, default 40)")
    p.add_argument("--seed", type=int, default=1, help="seed of the simulated bag (default 1)")
    p.set_defaults(func=run_demo)
