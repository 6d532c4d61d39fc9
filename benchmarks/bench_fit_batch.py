"""Benchmark: fitting 10,000 sweeps of 100 points with the THETA model, batched vs a curve_fit loop.

Run: ``cd /work/main && python benchmarks/bench_fit_batch.py [--sweeps N] [--loop-subset M]``

Prints sweeps per second of

- the batched Levenberg-Marquardt solver of ``benchlab.extract.engine`` (starting values + solve),
- the whole ``benchlab.extract.fit_batch`` (solve, plus thresholds, standard errors, flags per sweep),
- a plain Python loop of ``scipy.optimize.curve_fit`` on the same data, same relative error model
  (sigma = measured current) and same starting values: once with the bounds our solver keeps
  (KP > 0, THETA >= 0, which makes scipy use its 'trf' method) and once unbounded ('lm', MINPACK).

The loops time a subset of the sweeps (``--loop-subset``) and extrapolate to the full count; the
output says so. Both solvers' parameters are compared on that subset. Everything is measured
side by side in one run; the ratios, not the absolute times, are the result.
"""

from __future__ import annotations

import argparse
import sys
import time

from pathlib import Path

import numpy as np
from scipy.optimize import curve_fit

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

from benchlab.extract import fit_batch  # noqa: E402
from benchlab.extract.engine import fit_stacked, initial_guess, model_current  # noqa: E402


AIM = 20.0  # the speed-up the batched solver aims for against a plain loop of curve_fit


def theta_law(vgs, vth, kp, theta):
    q = np.maximum(vgs - vth, 0.0)
    return 0.5 * kp * q * q / (1.0 + theta * q)


def make_data(count: int, points: int, seed: int = 2026):
    """Synthetic theta-law sweeps over two decades of current with 0.1 % Gaussian noise."""
    rng = np.random.default_rng(seed)
    truth = np.column_stack([rng.uniform(2.0, 4.0, count), rng.uniform(0.5, 5.0, count),
                             rng.uniform(0.05, 0.5, count)])
    currents = np.geomspace(3e-3, 0.3, points)
    vth, kp, theta = truth.T
    # invert the law for VGS at each target current (exact quadratic root)
    it = currents * theta[:, None]
    q = (it + np.sqrt(it ** 2 + 2 * kp[:, None] * currents)) / kp[:, None]
    vgs = vth[:, None] + q
    ids = model_current("theta", vgs, truth) * (1 + 1e-3 * rng.standard_normal(vgs.shape))
    return truth, vgs, ids


def time_loop(vgs, ids, starts, bounded: bool):
    out = np.empty_like(starts)
    bounds = ([-np.inf, 1e-15, 0.0], [np.inf, np.inf, np.inf]) if bounded else (-np.inf, np.inf)
    t0 = time.perf_counter()
    for k in range(vgs.shape[0]):
        out[k], _ = curve_fit(theta_law, vgs[k], ids[k], p0=starts[k], sigma=ids[k], bounds=bounds, maxfev=20000)
    return time.perf_counter() - t0, out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sweeps", type=int, default=10_000)
    parser.add_argument("--points", type=int, default=100)
    parser.add_argument("--loop-subset", type=int, default=500)
    args = parser.parse_args(argv)
    truth, vgs, ids = make_data(args.sweeps, args.points)
    mask = np.ones_like(vgs)

    t0 = time.perf_counter()
    batch = fit_stacked("theta", vgs, ids, mask)  # starting values + solve, in cache-sized chunks of sweeps
    t_core = time.perf_counter() - t0
    starts = initial_guess("theta", vgs, ids, mask)  # the same starting values, handed to curve_fit

    t0 = time.perf_counter()
    # every point in the window (the default window, the top two decades, could drop a noisy end point)
    results = fit_batch(list(zip(vgs, ids)), model="theta", window=(1e-9, 1e3))
    t_full = time.perf_counter() - t0

    m = min(args.loop_subset, args.sweeps)
    t_bounded, p_bounded = time_loop(vgs[:m], ids[:m], starts[:m], bounded=True)
    t_lm, p_lm = time_loop(vgs[:m], ids[:m], starts[:m], bounded=False)
    scale = args.sweeps / m

    full_params = np.array([[r.vth, r.kp, r.theta] for r in results])
    rel = lambda a, b: np.max(np.abs(a - b) / np.maximum(np.abs(b), 1e-3), axis=0)  # noqa: E731
    dev_bounded = rel(batch.params[:m], p_bounded)
    dev_lm = rel(batch.params[:m], p_lm)
    dev_full = rel(full_params, batch.params)
    agree = bool(np.all(dev_bounded < 1e-5) and np.all(dev_full < 1e-9))

    print(f"{args.sweeps} sweeps x {args.points} points, THETA model, relative residuals")
    print(f"batched solver (start + solve):  {t_core:8.2f} s  {args.sweeps / t_core:10.0f} sweeps/s "
          f"(converged {batch.converged.mean() * 100:.2f} %, mean {batch.iterations.mean():.1f} iterations)")
    print(f"fit_batch (with thresholds, errors, flags): {t_full:8.2f} s  {args.sweeps / t_full:10.0f} sweeps/s")
    print(f"curve_fit loop, bounded (trf):   {t_bounded * scale:8.2f} s  {args.sweeps / (t_bounded * scale):10.0f} "
          f"sweeps/s  [timed on {m} sweeps, extrapolated x{scale:g}]")
    print(f"curve_fit loop, unbounded (lm):  {t_lm * scale:8.2f} s  {args.sweeps / (t_lm * scale):10.0f} "
          f"sweeps/s  [timed on {m} sweeps, extrapolated x{scale:g}]")
    print(f"speed-up of the batched solver:  {t_bounded * scale / t_core:6.1f}x vs bounded curve_fit loop, "
          f"{t_lm * scale / t_core:6.1f}x vs unbounded")
    print(f"speed-up of full fit_batch:      {t_bounded * scale / t_full:6.1f}x vs bounded curve_fit loop, "
          f"{t_lm * scale / t_full:6.1f}x vs unbounded")
    show = lambda a: np.array2string(a, precision=2)  # noqa: E731
    print(f"max relative difference (vth, kp, theta) batched vs bounded curve_fit: {show(dev_bounded)}")
    print(f"max relative difference (vth, kp, theta) batched vs unbounded curve_fit: {show(dev_lm)}")
    print(f"fit_batch equals the bare solver: max relative difference {np.array2string(dev_full, precision=2)}")
    print("same results: " + ("yes" if agree else "NO"))
    verdict = lambda ratio: f"{ratio:.1f}x, " + ("met" if ratio >= AIM else "NOT met")  # noqa: E731
    print(f"aim of {AIM:g}x for the batched solver: vs bounded curve_fit (the same bounded problem) "
          f"{verdict(t_bounded * scale / t_core)}; vs unbounded MINPACK {verdict(t_lm * scale / t_core)}")
    return 0 if agree else 1


if __name__ == "__main__":
    sys.exit(main())
