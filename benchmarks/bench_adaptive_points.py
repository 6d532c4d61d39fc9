"""Points per part needed to reach a Vth standard error of 2 mV: the adaptive step against a sweep evenly spaced
in supply volts, side by side on the same simulated parts (resistor fixture, time scale 0).

Three ways, every point taken counted (the search for conduction too):

- ``fit``: the adaptive sweep aimed at the fit (``vth_stderr_v = 2 mV``, top target 50 mA): a coarse search for
  conduction along the resistor's load line, then points spread over the two decades below the top, stopping
  once the running fit (the fitter's own, model auto) reports a Vth standard error of 2 mV or less;
- ``targets``: the adaptive sweep of evenly spread log(current) targets up to 50 mA, at the smallest budget N
  that reaches 2 mV;
- ``even``: N supply voltages evenly from the start to the supply voltage the ``targets`` sweep needed for 50 mA,
  at the smallest N that reaches 2 mV.

Each sweep's conducting points are fitted (model auto). Prints the median over the parts and the ratios to
``even``, and how far each way's fitted Vth lies from the simulator's true threshold of the part (at the ambient
the fit is made at): a sweep that reaches 2 mV with a biased fit would show there. Run: ``python benchmarks/bench_adaptive_points.py [--parts 6] [--start-v 2.0]``.
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
from benchlab.services.fitting import running_vth_stderr  # noqa: E402
from benchlab.sim.bench import SimBench, SimConfig  # noqa: E402
from benchlab.sim.physics import threshold_at  # noqa: E402
from benchlab.sweep.engine import run  # noqa: E402

TARGET_V = 0.002
BUDGETS = (6, 8, 10, 12, 14, 16, 20, 24, 28, 32, 40, 48, 56, 64)


def vth_fit(points, temperature_k: float) -> tuple[float, float]:
    """(Vth standard error, fitted Vth) of the points (model auto); (inf, nan) when there is no fit."""
    ok = [(p.vgs, p.id) for p in points if p.status == "ok" and p.id > 2e-6]
    if len(ok) < 4:
        return float("inf"), float("nan")
    vgs, i_d = (np.array(x) for x in zip(*sorted(ok)))
    try:
        result = fit_sweep(vgs, i_d, temperature_k=temperature_k)
    except BenchlabError:
        return float("inf"), float("nan")
    err = result.stderr.get("vth")
    return (float(err) if err is not None and np.isfinite(err) else float("inf")), float(result.params.vth)


def _sweep(part_index: int, start_v: float, mode: str, budget: int, seed: int):
    """(points, top supply voltage, ambient K, true Vth at the ambient) of one sweep of the given kind on a fresh
    simulated bench; points None when the part is not a good one."""
    with SimBench(SimConfig(time_scale=0.0, bag_size=part_index + 1, seed=seed)) as sim:
        config = simulator_bench_config(sim.start(first_port=0), series_resistor_ohm=sim.series_resistor_actual_ohm)
        handle = connect(config, sim)
        try:
            for _ in range(part_index):
                sim.core.next_part()
            if sim.current_part is None or sim.current_part.to_dict().get("kind", "good") != "good":
                return None, None, sim.config.ambient_k, None
            truth = threshold_at(sim.current_part, sim.config.ambient_k)  # the fits are made at the ambient
            common = dict(max_current_a=0.05, down_sweep=False, settle_s=0.0)
            if mode == "fit":
                plan = build_plan(config, start_v=start_v, vth_stderr_v=TARGET_V, **common)
                fit = lambda pts: running_vth_stderr(pts, sim.config.ambient_k)  # noqa: E731
                return run(plan, handle.bench, vth_stderr=fit).points, None, sim.config.ambient_k, truth
            adaptive = run(build_plan(config, points=budget, start_v=start_v, **common), handle.bench)
            top = max(p.v_source for p in adaptive.points)
            if mode == "targets":
                return adaptive.points, top, sim.config.ambient_k, truth
            even = run(build_plan(config, voltages=tuple(np.linspace(start_v, top, budget)), **common), handle.bench)
            return even.points, top, sim.config.ambient_k, truth
        finally:
            handle.close()


def needed(part_index: int, mode: str, start_v: float, seed: int = 5) -> tuple[int, float, float] | None:
    """(points, fitted Vth - true Vth, its standard error) of the sweep of this kind that first reached a Vth
    standard error within TARGET_V (None: not a good part, or not reached)."""
    for budget in (0,) if mode == "fit" else BUDGETS:
        points, _, ambient_k, truth = _sweep(part_index, start_v, mode, budget, seed)
        if points is None:
            return None
        err, vth = vth_fit(points, ambient_k)
        if err <= TARGET_V:
            return len(points), vth - truth, err
    return None


def _range_mv(errors: list[tuple[float, float]]) -> str:
    """Median and range of |fitted - true Vth|, and in how many fits the truth lies within two quoted standard
    errors (about 95 % of honest fits would; a check on the error the stop rule trusts)."""
    size = [abs(e) * 1e3 for e, _ in errors]
    covered = sum(abs(e) <= 2 * se for e, se in errors)
    return (f"median {statistics.median(size):.2f} mV, {min(size):.2f}-{max(size):.2f} mV, "
            f"within 2 standard errors in {covered} of {len(errors)}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=6)
    parser.add_argument("--start-v", type=float, default=0.0, help="where both sweeps start (V)")
    parser.add_argument("--seed", type=int, default=5, help="seed of the simulated bag (and its noise)")
    args = parser.parse_args(argv)
    modes = ("fit", "targets", "even")
    counts: dict[str, list[int]] = {m: [] for m in modes}
    errors: dict[str, list[tuple[float, float]]] = {m: [] for m in modes}
    print(f"both sweeps start at {args.start_v:g} V; simulated bag of seed {args.seed}")
    for index in range(args.parts):
        got = {m: needed(index, m, args.start_v, args.seed) for m in modes}
        if any(v is None for v in got.values()):
            print(f"part {index + 1}: skipped (not a good part, or {TARGET_V * 1e3:g} mV not reached: {got})")
            continue
        for m in modes:
            counts[m].append(got[m][0])
            errors[m].append(got[m][1:])
        print(f"part {index + 1}: " + ", ".join(f"{m} {got[m][0]} points (Vth {got[m][1] * 1e3:+.2f} mV from truth)"
                                                 for m in modes), flush=True)
    if counts["even"]:
        med = {m: statistics.median(counts[m]) for m in modes}
        print(f"median points to Vth stderr <= {TARGET_V * 1e3:g} mV: " + ", ".join(f"{m} {med[m]:g}" for m in modes)
              + f"; ratio fit/even {med['fit'] / med['even']:.2f}, targets/even {med['targets'] / med['even']:.2f}")
        print("fitted Vth against the simulator's truth: " + "; ".join(f"{m} {_range_mv(errors[m])}" for m in modes))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
