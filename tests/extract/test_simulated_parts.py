"""Fits of curves from the simulator's physics, an implementation of the EKV model written apart from ours.

benchlab.sim.physics follows Enz, Krummenacher, Vittoz (Analog Integrated Circuits and Signal
Processing 8(1) 83-114, 1995) with the reverse (drain-side) current, a leakage conductance and
its own temperature laws; fitting its curves with the shared EKV model must give the part's
parameters back (no self-heating here: the junction is held at the reference temperature).
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.extract import fit_batch
from benchlab.sim.bag import make_bag
from benchlab.sim.physics import REFERENCE_TEMPERATURE_K, voltage_at_current


def test_fitted_parameters_match_the_simulated_parts():
    parts = [p for p in make_bag(seed=7, size=12) if p.kind == "good"][:6]
    currents = np.geomspace(10e-6, 0.1, 30)  # the sweep engine's default target range
    sweeps = [([voltage_at_current(p, i, REFERENCE_TEMPERATURE_K) for i in currents], currents) for p in parts]
    results = fit_batch(sweeps)
    for part, result in zip(parts, results):
        assert result.model == "ekv", result.reason
        assert result.vth == pytest.approx(part.vth_ref, abs=2e-3)
        assert result.kp == pytest.approx(part.kp_ref, rel=0.02)
        assert result.theta == pytest.approx(part.theta, abs=0.02)
        assert result.n == pytest.approx(part.slope_n, rel=0.01)
        assert result.vth_cc == pytest.approx(voltage_at_current(part, 250e-6, REFERENCE_TEMPERATURE_K), abs=1e-4)
