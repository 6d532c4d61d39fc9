"""Pairing speed: 10,000 parts in under 2 s, and the ratio against brute force measured side by side.

Run from the repository root: ``python benchmarks/bench_matching.py``. The bag is invented (a
simulated lot of N-channel power MOSFETs with theta-law curves; a tenth fitted with other laws).
Brute force costs every pair (O(n^2)) and is timed on a subset, together with the fast
method on the same subset, so the ratio comes from one run on one machine.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchlab.design.matching import brute_force_pairs, current_grid, match_pairs  # noqa: E402
from benchlab.design.parts import Part  # noqa: E402
from benchlab.models import DeviceParams  # noqa: E402


def invented_bag(n: int, seed: int = 40) -> list[Part]:
    rng = np.random.default_rng(seed)
    parts = []
    for i in range(n):
        vth = float(rng.normal(3.0, 0.15))
        kp = float(rng.uniform(0.7, 1.3))
        kind = rng.random()
        if kind < 0.9:
            params = DeviceParams("theta", vth, kp=kp, theta=float(rng.uniform(0.05, 0.3)))
        elif kind < 0.95:
            params = DeviceParams("square", vth, kp=kp)
        else:
            params = DeviceParams("linear", vth, gm=float(rng.uniform(0.4, 0.8)))
        parts.append(Part(f"Q{i:05d}", params, lot="invented"))
    return parts


def timed(func, *args, **kwargs):
    start = time.perf_counter()
    result = func(*args, **kwargs)
    return time.perf_counter() - start, result


def main() -> int:
    bag = invented_bag(10_000)
    match_pairs(bag[:50], current_grid(0.05))  # warm-up: loads scipy.spatial once, outside the timings
    print("(timings exclude Python start-up and the first import of scipy.spatial)")
    ok = True
    for name, currents in (("one current (50 mA)", current_grid(0.05)),
                           ("range 10..200 mA, 7 points", current_grid(0.01, 0.2))):
        seconds, result = timed(match_pairs, bag, currents)
        ok &= seconds < 2.0
        print(f"10000 parts, {name}: {len(result.sets)} pairs in {seconds:.3f} s "
              f"({'under' if seconds < 2.0 else 'OVER'} the 2 s target); best {result.sets[0].worst_error:.2e}, "
              f"median {result.sets[len(result.sets) // 2].worst_error:.2e}")
        subset = bag[:1500]
        fast_s, fast = timed(match_pairs, subset, currents)
        brute_s, brute = timed(brute_force_pairs, subset, currents)
        same = np.allclose([s.worst_error for s in fast.sets], brute, rtol=1e-12, atol=0)
        ok &= bool(same)
        print(f"  subset of 1500: fast {fast_s:.3f} s, brute force {brute_s:.3f} s, ratio {brute_s / fast_s:.1f}x, "
              f"same pairs costs: {same}")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
