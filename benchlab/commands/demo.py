"""``benchlab demo``: the whole main job on the simulated bench, started in process.

Sweeps the invented demo bag, fits and stores every part, picks a matched set, designs the
current sink, exports SPICE cards and writes the report, all into one new run folder.
"""

from __future__ import annotations

import argparse
import sys
import time

from benchlab.commands._args import add_sim_options, counting_number, json_option, print_json, sim_settings


def run_demo(args: argparse.Namespace) -> int:
    from benchlab.commands.sweep import ProgressBar
    from benchlab.services import characterize, demo

    say = sys.stderr if args.json else sys.stdout
    print(characterize.DEMO_STORY, file=say)
    print("The simulated bench starts on free loopback ports; nothing real is powered.\n", file=say)
    started = time.monotonic()
    run = demo.run_full_demo(args.out, count=args.count, seed=sim_settings(args, ["seed"])["seed"],
                             on_event=ProgressBar(out=say), say=lambda line: print(line, file=say))
    if args.json:
        print_json({"folder": str(run.folder), "swept": run.swept, "fitted": run.fitted, "rejected": run.rejected,
                    "session": str(run.session), "library": str(run.library), "models": str(run.models),
                    "netlist": str(run.netlist), "report": str(run.report)})
        return 0
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
    p.add_argument("--count", type=counting_number, default=40, metavar="N",
                   help="parts of the 40-part bag to sweep (up to 40, default 40); the design needs a matched "
                        "set of 9 good parts, which fewer than about 20 swept parts may not hold (it then stops "
                        "after the sweep and says so)")
    add_sim_options(p, "seed")
    json_option(p, "where everything went")
    p.set_defaults(func=run_demo)
