"""SMU list sweep against point-by-point, side by side in one run, with the simulator's round-trip latency set
to LAN values (1 ms and 5 ms per reply) at real time scale.

The same 40 source voltages on the same simulated part, once uploaded as lists (one trigger per list, one buffer
read) and once point by point (set, error-queue check, read, compliance check), both with a single reading per
point and no source delay beyond the SMU's own 1 ms settling, at 0.01, 0.1 and 1 PLC. The list runs in the
sweep's default chunks of 8 (a stop loses at most 8 points) and as one list of 40. With ``--pipelined`` the SMU's
profile says the instrument takes a setting and its error-queue query in one message (``pipeline_error_check``):
both paths then send fewer messages. Prints the wall time of each and the ratio point/list.
Run: ``python benchmarks/bench_list_vs_point.py [--pipelined] [--nplc 0.01,0.1,1]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

import numpy as np  # noqa: E402

from benchlab.instruments.config import simulator_bench_config  # noqa: E402
from benchlab.services.characterize import build_plan, connect  # noqa: E402
from benchlab.sim.bench import SimBench, SimConfig  # noqa: E402
from benchlab.sweep.engine import run  # noqa: E402

VOLTAGES = tuple(float(v) for v in np.linspace(0.5, 3.0, 40))
POWER_LINE_CYCLE_S = 0.02
SMU_SETTLE_S = 0.001  # the simulated SMU's own settling after each level change (docs/sim.md)


def timed(latency_s: float, nplc: float, use_list: bool, chunk: int, pipelined: bool) -> tuple[float, int]:
    with SimBench(SimConfig(fixture="smu", time_scale=1.0, latency_s=latency_s, bag_size=1)) as sim:
        config = simulator_bench_config(sim.start(first_port=0), fixture="smu")
        handle = connect(config, sim)
        try:
            smu = handle.bench.smu
            if hasattr(smu.profile, "pipeline_error_check"):
                smu.profile = replace(smu.profile, pipeline_error_check=pipelined)
            elif pipelined:
                raise SystemExit("this benchlab has no pipeline_error_check profile flag")
            plan = build_plan(config, voltages=VOLTAGES, use_list=use_list, settle_s=0.0, nplc=nplc,
                              repeat_reading=False, max_current_a=0.1, list_chunk=chunk)
            started = time.perf_counter()
            outcome = run(plan, handle.bench)
            return time.perf_counter() - started, len(outcome.points)
        finally:
            handle.close()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pipelined", action="store_true", help="profile flag pipeline_error_check on")
    parser.add_argument("--nplc", default="0.01,0.1,1", help="integration times to try (PLC, comma-separated)")
    args = parser.parse_args(argv)
    nplcs = [float(x) for x in args.nplc.split(",")]
    n = len(VOLTAGES)
    print(f"SMU, {n} voltages, real time scale, pipelined error check {'on' if args.pipelined else 'off'}; "
          f"floor = points x (SMU settling + one integration)")
    for latency in (0.001, 0.005):
        for nplc in nplcs:
            floor = n * (SMU_SETTLE_S + nplc * POWER_LINE_CYCLE_S)
            point, n_point = timed(latency, nplc, False, 8, args.pipelined)
            line = (f"latency {latency * 1e3:3.0f} ms  {nplc:5.2f} PLC  floor {floor:5.2f} s  "
                    f"point by point {point:5.2f} s ({n_point} pts)")
            for chunk in (8, n):
                listed, n_list = timed(latency, nplc, True, chunk, args.pipelined)
                line += f"  list/{chunk} {listed:5.2f} s ({n_list} pts) ratio {point / listed:4.1f}"
            print(line, flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
