"""Sweep wall time against the floor the instruments impose, on the simulated bench at real time scale.

The floor of a sweep is points x (settle + one integration): nothing can be faster than waiting for
the part to settle and the meter to integrate once per point. When the meter reads the drain current
too, one meter must integrate twice per point, so that sweep's own floor is points x (settle + two
integrations); both ratios are printed. The engine overlaps what the instruments allow (the meter is
triggered with INIT and the supply read back while it integrates, then FETC?; the settle wait counts
from the setpoint's write), takes a first reading that lands on the predicted curve as settled, and
reads again only where nothing predicts the point or the reading is off the curve. The rows "always
reading twice" show the settle check without the prediction, side by side in the same run.
Run: ``python benchmarks/bench_sweep_walltime.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

from benchlab.instruments.config import simulator_bench_config
from benchlab.services.characterize import build_plan, connect
from benchlab.sim.bench import SimBench, SimConfig
from benchlab.sweep.engine import run

PLC_S = 0.02  # one power-line cycle at 50 Hz, the simulator's integration unit


def timed_sweep(label: str, **plan_options) -> None:
    with SimBench(SimConfig(time_scale=1.0, bag_size=1)) as sim:
        resources = sim.start(first_port=0)
        config = simulator_bench_config(resources, series_resistor_ohm=sim.series_resistor_actual_ohm)
        handle = connect(config)
        try:
            plan = build_plan(config, **plan_options)
            started = time.perf_counter()
            outcome = run(plan, handle.bench)
            wall = time.perf_counter() - started
        finally:
            handle.close()
    points = len(outcome.points)
    floor = points * (plan.settle_s + plan.nplc * PLC_S)
    integrations = 2 if plan.current_from == "meter" else 1
    own_floor = points * (plan.settle_s + integrations * plan.nplc * PLC_S)
    print(f"{label:<56} {points:>3} points  wall {wall:6.2f} s  floor {floor:6.2f} s  ratio {wall / floor:5.2f}"
          f"  (own floor, {integrations} integration(s): {wall / own_floor:5.2f})")


def main() -> None:
    print("sweep wall time / instrument floor, simulated bench at real time scale (settle 50 ms, 1 PLC)")
    common = dict(points=12, max_current_a=0.05, start_v=2.2, settle_s=0.05, nplc=1.0)
    timed_sweep("ID from resistor drop, settle check by prediction", current_from="resistor", **common)
    timed_sweep("ID from resistor drop, settle check always reading twice", current_from="resistor",
                settle_by_prediction=False, **common)
    timed_sweep("ID from resistor drop, single reading (no settle check)", current_from="resistor",
                repeat_reading=False, **common)
    timed_sweep("meter reads ID, settle check by prediction", **common)
    timed_sweep("meter reads ID, settle check always reading twice", settle_by_prediction=False, **common)
    timed_sweep("meter reads ID, single reading (no settle check)", repeat_reading=False, **common)

if __name__ == "__main__":
    main()
