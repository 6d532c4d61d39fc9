"""Sweep wall time against the floor the instruments impose, on the simulated bench at real time scale.

The floor of a sweep is points x (settle + one integration): nothing can be faster than waiting for
the part to settle and the meter to integrate once per point. The engine does more per point on
purpose (a repeated reading to catch parts that do not settle, the drain current read by the meter,
the supply's readbacks, the error-queue check after every setting), so the ratio shows what that
safety and bookkeeping cost. Run: ``python benchmarks/bench_sweep_walltime.py``.
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
    print(f"{label:<44} {points:>3} points  wall {wall:6.2f} s  floor {floor:6.2f} s  ratio {wall / floor:5.2f}")


def main() -> None:
    print("sweep wall time / instrument floor, simulated bench at real time scale (settle 50 ms, 1 PLC)")
    common = dict(points=12, max_current_a=0.05, start_v=2.2, settle_s=0.05, nplc=1.0)
    timed_sweep("adaptive, meter reads ID, repeated reading", **common)
    timed_sweep("adaptive, meter reads ID, single reading", repeat_reading=False, **common)
    timed_sweep("adaptive, ID from resistor drop, single reading", repeat_reading=False, current_from="resistor",
                **common)


if __name__ == "__main__":
    main()
