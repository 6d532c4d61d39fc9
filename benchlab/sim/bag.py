"""A seeded bag of simulated N-channel power MOSFETs (the invented demo scenario).

The spreads are invented for the demo and only meant to look like a bag of one
power-MOSFET type from one lot: threshold around 2-4 V (normal, mean 2.9 V, sigma 0.3 V,
clipped to 2.0-4.0 V), KP log-normal around 2.5 A/V^2 (sigma 20 %), THETA 0.1-0.4 /V,
slope factor 1.3-1.8, threshold coefficient -3 to -7 mV/K. Datasheets of such parts state
VGS(th) between 2 and 4 V and temperature coefficients of a few mV/K; the specific
numbers here are ours. A few duds are placed at fixed, seeded positions: one open, one
shorted, one leaky per 20 parts (at least one of each for a bag of 3 or more).
"""

from __future__ import annotations

import numpy as np

from benchlab.choices import SIM_BAG_SIZE as DEFAULT_BAG_SIZE
from benchlab.sim.physics import PartPhysics


def part_label(index: int) -> str:
    """``Q01`` for index 0 (two digits up to 99, then as many as needed)."""
    return f"Q{index + 1:02d}"


def _dud_positions(rng: np.random.Generator, size: int) -> dict[int, str]:
    if size < 3:
        return {}
    per_kind = max(1, size // 20)
    kinds = ["open"] * per_kind + ["short"] * per_kind + ["leaky"] * per_kind
    # keep Q01 a good part so a first single sweep on the simulator shows a sensible curve
    positions = rng.choice(np.arange(1, size), size=min(len(kinds), size - 1), replace=False)
    return {int(pos): kind for pos, kind in zip(positions, kinds)}


def make_bag(seed: int = 1, size: int = DEFAULT_BAG_SIZE, *, rth_k_per_w: float = 62.0,
             tau_thermal_s: float = 45.0) -> tuple[PartPhysics, ...]:
    """Draw ``size`` parts from the seeded distribution described in the module docstring.

    Parameters
    ----------
    seed : int
        Same seed, same bag.
    size : int
        Number of parts (>= 1).
    rth_k_per_w, tau_thermal_s : float
        Thermal resistance and time constant of every part (a free-standing TO-220-like
        package: about 62 K/W junction to ambient, from memory; the time constant is invented).

    Returns
    -------
    tuple of PartPhysics
    """
    if size < 1:
        raise ValueError("a bag needs at least one part")
    rng = np.random.default_rng(seed)
    duds = _dud_positions(rng, size)
    parts = []
    for index in range(size):
        vth = float(np.clip(rng.normal(2.9, 0.3), 2.0, 4.0))
        kp = float(2.5 * np.exp(rng.normal(0.0, 0.2)))
        theta = float(rng.uniform(0.1, 0.4))
        slope_n = float(rng.uniform(1.3, 1.8))
        dvth_dt = float(-rng.uniform(3e-3, 7e-3))
        leak = float(10 ** rng.uniform(-10.0, -9.0))
        kind = duds.get(index, "good")
        if kind == "leaky":
            leak = float(10 ** rng.uniform(-4.0, -3.5))  # 100-300 uA per volt
        parts.append(PartPhysics(
            label=part_label(index), kind=kind, vth_ref=vth, kp_ref=kp, theta=theta,
            slope_n=slope_n, leak_siemens=leak, dvth_dt=dvth_dt,
            rth_k_per_w=rth_k_per_w, tau_thermal_s=tau_thermal_s,
        ))
    return tuple(parts)
