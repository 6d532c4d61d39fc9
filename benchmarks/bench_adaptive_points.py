"""Points per part needed to reach a Vth standard error of 2 mV: the adaptive step against a sweep evenly spaced
in supply volts, side by side on the same simulated parts (resistor fixture, time scale 0).

For each part and each budget N, the adaptive sweep aims at N log-spaced currents up to 50 mA (its search for
conduction counts too: every point taken is counted), and the even sweep takes N supply voltages from 0 V to the
supply voltage the adaptive sweep needed for 50 mA. Each sweep's conducting points are fitted (model auto) and
the smallest point count whose Vth standard error is 2 mV or less is kept. Prints the median over the parts and
the ratio even/adaptive. Run: ``python benchmarks/bench_adaptive_points.py [--parts 6]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

import numpy as np  # noqa: E402

from benchlab.errors import BenchlabError  # noqa: E402
from benchlab.extract.fit import fit_sweep  # noqa: E402
from benchlab.instruments.config import simulator_bench_config  # noqa: E402
from benchlab.services.characterize import build_plan, connect  # noqa: E402
from benchlab.sim.bench import SimBench, SimConfig  # noqa: E402
from benchlab.sweep.engine import run  # noqa: E402

TARGET_V = 0.002
BUDGETS = (6, 8, 10, 12, 14, 16, 20, 24, 28, 32, 40, 48, 56, 64)


def vth_stderr(points, temperature_k: float) -> float:
    ok = [(p.vgs, p.id) for p in points if p.status == "ok" and p.id > 2e-6]
    if len(ok) < 4:
        return float("inf")
    vgs, i_d = (np.array(x) for x in zip(*sorted(ok)))
    try:
        result = fit_sweep(vgs, i_d, temperature_k=temperature_k)
    except BenchlabError:
        return float("inf")
    err = result.stderr.get("vth")
    return float(err) if err is not None and np.isfinite(err) else float("inf")


def needed(part_index: int, mode: str, start_v: float) -> int | None:
    for budget in BUDGETS:
        with SimBench(SimConfig(time_scale=0.0, bag_size=part_index + 1, seed=5)) as sim:
            config = simulator_bench_config(sim.start(first_port=0), series_resistor_ohm=sim.series_resistor_actual_ohm)
            handle = connect(config, sim)
            try:
                for _ in range(part_index):
                    sim.core.next_part()
                if sim.current_part is None or sim.current_part.to_dict().get("kind", "good") != "good":
                    return None
                common = dict(max_current_a=0.05, down_sweep=False, settle_s=0.0)
                adaptive = run(build_plan(config, points=budget, start_v=start_v, **common), handle.bench)
                if mode == "adaptive":
                    points = adaptive.points
                else:
                    top = max(p.v_source for p in adaptive.points)
                    points = run(build_plan(config, voltages=tuple(np.linspace(start_v, top, budget)), **common),
                                 handle.bench).points
                if vth_stderr(points, sim.config.ambient_k) <= TARGET_V:
                    return len(points)
            finally:
                handle.close()
    return None


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=6)
    parser.add_argument("--start-v", type=float, default=0.0, help="where both sweeps start (V)")
    args = parser.parse_args(argv)
    counts = {"adaptive": [], "even": []}
    print(f"both sweeps start at {args.start_v:g} V")
    for index in range(args.parts):
        adaptive, even = needed(index, "adaptive", args.start_v), needed(index, "even", args.start_v)
        if adaptive is None or even is None:
            print(f"part {index + 1}: skipped (not a good part, or {TARGET_V * 1e3:g} mV not reached within "
                  f"{BUDGETS[-1]} points: adaptive {adaptive}, even {even})")
            continue
        counts["adaptive"].append(adaptive)
        counts["even"].append(even)
        print(f"part {index + 1}: adaptive {adaptive} points, even {even} points")
    if counts["adaptive"]:
        a, e = statistics.median(counts["adaptive"]), statistics.median(counts["even"])
        print(f"median points to Vth stderr <= {TARGET_V * 1e3:g} mV: adaptive {a:g}, even {e:g}; "
              f"ratio adaptive/even {a / e:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
