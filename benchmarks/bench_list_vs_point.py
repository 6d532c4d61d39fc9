"""SMU list sweep against point-by-point, side by side in one run, with the simulator's round-trip latency set
to LAN values (1 ms and 5 ms per message) at real time scale.

The same 40 source voltages on the same simulated part, once uploaded as a list (one trigger, one buffer read)
and once point by point (set, read, compliance check, each followed by the error-queue read), both with a
single reading per point and no settle wait, at 1 PLC and at 0.1 PLC. Prints the wall time of each and the
ratio point/list. Run: ``python benchmarks/bench_list_vs_point.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

import numpy as np  # noqa: E402

from benchlab.instruments.config import simulator_bench_config  # noqa: E402
from benchlab.services.characterize import build_plan, connect  # noqa: E402
from benchlab.sim.bench import SimBench, SimConfig  # noqa: E402
from benchlab.sweep.engine import run  # noqa: E402

VOLTAGES = tuple(float(v) for v in np.linspace(0.5, 3.0, 40))


def timed(latency_s: float, nplc: float, use_list: bool) -> tuple[float, int]:
    with SimBench(SimConfig(fixture="smu", time_scale=1.0, latency_s=latency_s, bag_size=1)) as sim:
        config = simulator_bench_config(sim.start(first_port=0), fixture="smu")
        handle = connect(config, sim)
        try:
            plan = build_plan(config, voltages=VOLTAGES, use_list=use_list, settle_s=0.0, nplc=nplc,
                              repeat_reading=False, max_current_a=0.1)
            started = time.perf_counter()
            outcome = run(plan, handle.bench)
            return time.perf_counter() - started, len(outcome.points)
        finally:
            handle.close()


def main() -> None:
    print(f"SMU, {len(VOLTAGES)} voltages, real time scale: wall time point by point / list")
    for latency in (0.001, 0.005):
        for nplc in (1.0, 0.1):
            point, n_point = timed(latency, nplc, False)
            listed, n_list = timed(latency, nplc, True)
            print(f"latency {latency * 1e3:3.0f} ms  {nplc:4.1f} PLC  point by point {point:6.2f} s ({n_point} pts)  "
                  f"list {listed:6.2f} s ({n_list} pts)  ratio {point / listed:5.1f}")


if __name__ == "__main__":
    main()
