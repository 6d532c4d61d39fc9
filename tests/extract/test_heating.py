"""The self-heating check on ngspice sweeps that do not heat (ngspice has no self-heating).

Source of truth: ngspice level 3 and BSIM3 (level 8) diode-connected parts through 10 ohm, up to about
0.9 W, read with meter noise: whatever the model fitted, the residuals must not be taken for heating.
(The positive case, a part warmed by Rth x P with a threshold falling 5 mV/K, is in test_flags.py.)
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.extract import fit_batch

from .conftest import meter_readings

pytestmark = pytest.mark.ngspice

LEVEL3 = ".model NMOD NMOS (LEVEL=3 VTO=2.85 KP=2.4 THETA=0.3)"
BSIM3 = ".model NMOD NMOS (LEVEL=8 VERSION=3.3.0 TOX=2e-8 VTH0=1.5 U0=500 NFACTOR=1.0)"


@pytest.mark.parametrize("card, geometry, models", [
    (LEVEL3, "W=1 L=1", ("square", "theta", "auto")),
    (BSIM3, "W=0.05 L=2u", ("ekv", "auto")),
], ids=["level3", "bsim3"])
def test_no_heating_flag_without_heating(spice, card, geometry, models):
    v_supply, v_part, _ = spice.resistor_sweep(card, resistor=10.0, stop=6.0, step=0.02, geometry=geometry)
    rng = np.random.default_rng(51)
    sweeps = [meter_readings(v_supply, v_part, 10.0, rng, floor=1e-5) for _ in range(30)]
    assert max(float(np.max(v * i)) for v, i in sweeps) > 0.5  # real power: the check is judged
    for model in models:
        flagged = [r for r in fit_batch(sweeps, model) if "self_heating_drift" in r.flags]
        assert not flagged, (model, flagged[0].notes)
