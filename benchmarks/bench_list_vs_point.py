"""SMU list sweep against point-by-point, side by side in one run, with the simulator's round-trip latency set
to LAN values (1 ms and 5 ms per reply) at real time scale.

The same 40 source voltages on the same simulated part, once uploaded as lists (one trigger per list, one buffer
read) and once point by point (set, error-queue check, read, compliance check), both with a single reading per
point and no source delay beyond the SMU's own 1 ms settling, at 0.01, 0.1 and 1 PLC. The list runs in the
sweep's default chunks of 8 (a stop loses at most 8 points) and as one list of 40. With ``--pipelined`` the SMU's
profile says the instrument takes a setting and its error-queue query in one message (``pipeline_error_check``):
both paths then send fewer messages (the sweep's start as one message with one error check, the reading with its
compliance status and the setpoint's check). Prints the wall time of each, the round trips it took (messages
holding a query, counted in the simulator's log: only those wait for the latency), the ratio point/list, and the
bound, the ratio if round trips and the instrument's own time were all it cost:
(round trips(point) x latency + floor) / (round trips(list) x latency + floor).
Run: ``python benchmarks/bench_list_vs_point.py [--pipelined] [--nplc 0.01,0.1,1] [--runs 3]``.
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


def timed(latency_s: float, nplc: float, use_list: bool, chunk: int, pipelined: bool) -> tuple[float, int, int]:
    """Wall time, points and round trips (SMU messages holding a query) of one sweep."""
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
            sent_before = len(sim.log.commands("smu"))
            started = time.perf_counter()
            outcome = run(plan, handle.bench)
            elapsed = time.perf_counter() - started
            round_trips = sum("?" in line for line in sim.log.commands("smu")[sent_before:])
            return elapsed, len(outcome.points), round_trips
        finally:
            handle.close()


def _span(values: list[float], fmt: str) -> str:
    low, high = min(values), max(values)
    return format(low, fmt) if format(low, fmt) == format(high, fmt) else f"{low:{fmt}}-{high:{fmt}}"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pipelined", action="store_true", help="profile flag pipeline_error_check on")
    parser.add_argument("--nplc", default="0.01,0.1,1", help="integration times to try (PLC, comma-separated)")
    parser.add_argument("--runs", type=int, default=3, help="rounds of the three sweeps side by side (ranges shown)")
    args = parser.parse_args(argv)
    nplcs = [float(x) for x in args.nplc.split(",")]
    n = len(VOLTAGES)
    print(f"SMU, {n} voltages, real time scale, pipelined error check {'on' if args.pipelined else 'off'}, "
          f"{args.runs} round(s); floor = points x (SMU settling + one integration); rt = round trips per sweep")
    for latency in (0.001, 0.005):
        for nplc in nplcs:
            floor = n * (SMU_SETTLE_S + nplc * POWER_LINE_CYCLE_S)
            times: dict[str, list[float]] = {}
            trips: dict[str, int] = {}
            for _ in range(max(1, args.runs)):
                for name, use_list, chunk in (("point", False, 8), ("list/8", True, 8), (f"list/{n}", True, n)):
                    elapsed, points, round_trips = timed(latency, nplc, use_list, chunk, args.pipelined)
                    if points != n:
                        raise SystemExit(f"{name}: {points} points of {n}")
                    times.setdefault(name, []).append(elapsed)
                    trips[name] = round_trips
            line = (f"latency {latency * 1e3:3.0f} ms  {nplc:5.2f} PLC  floor {floor:5.3f} s  "
                    f"point {_span(times['point'], '.3f')} s ({trips['point']} rt)")
            for name in ("list/8", f"list/{n}"):
                ratios = [p / q for p, q in zip(times["point"], times[name])]
                bound = (trips["point"] * latency + floor) / (trips[name] * latency + floor)
                line += (f"  {name} {_span(times[name], '.3f')} s ({trips[name]} rt) ratio {_span(ratios, '.1f')}"
                         f" (bound {bound:.1f})")
            print(line, flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
