"""The fitter against ngspice: simulated diode-connected parts on a resistor line, read with meter noise.

Source of truth: ngspice's own MOSFET models (level 1: Shichman-Hodges square law; level 3:
mobility degradation THETA), run in batch mode with tight tolerances. The fit must give back
the model card's parameters, and VGS at 250 uA must match ngspice's operating point with a
current source.
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.extract import fit_sweep
from benchlab.extract.diagnostics import monotonic_check

from .conftest import meter_readings

pytestmark = pytest.mark.ngspice

R_SERIES = 470.0
LEVEL1 = ".model NMOD NMOS (LEVEL=1 VTO=3.2 KP=1.8)"
LEVEL3 = ".model NMOD NMOS (LEVEL=3 VTO=2.85 KP=2.4 THETA=0.3)"


def _measured(spice, card, seed):
    v_supply, v_part, _ = spice.resistor_sweep(card, resistor=R_SERIES)
    return meter_readings(v_supply, v_part, R_SERIES, np.random.default_rng(seed))


def test_level1_card_recovered_from_noisy_sweep(spice):
    vgs, i_d = _measured(spice, LEVEL1, seed=1)
    result = fit_sweep(vgs, i_d, model="square")
    # ngspice level 1 (VTO=3.2 V, KP=1.8 A/V^2): VTO within 10 mV, KP within 3 %
    assert abs(result.vth - 3.2) < 0.010
    assert abs(result.kp / 1.8 - 1) < 0.03
    # the quoted standard errors are honest: the truth lies within 5 of them
    assert abs(result.vth - 3.2) < 5 * result.stderr["vth"] + 1e-4
    assert "poor_fit" not in result.flags


def test_level1_auto_choice_reports_the_card(spice):
    vgs, i_d = _measured(spice, LEVEL1, seed=2)
    result = fit_sweep(vgs, i_d)
    # ngspice level 1 has no THETA and no subthreshold current: the square law, or the THETA law where the noise put
    # THETA above its bound (the automatic choice reports THETA whenever it comes out above 0, as a real part has
    # it); either way the threshold is VTO within 2 of its quoted errors, and a reported THETA is consistent with 0
    assert result.model in ("square", "theta"), result.reason
    assert abs(result.vth - 3.2) < 0.010
    assert abs(result.vth - 3.2) <= 2 * result.stderr["vth"]
    assert result.theta <= 2 * (result.stderr["theta"] or 0.0)
    assert "parameters_poorly_determined" not in result.flags, result.notes


def test_level3_theta_card_recovered(spice):
    vgs, i_d = _measured(spice, LEVEL3, seed=3)
    result = fit_sweep(vgs, i_d, model="theta")
    # ngspice level 3 (VTO=2.85 V, KP=2.4 A/V^2, THETA=0.3 1/V): VTO within 10 mV, KP within 3 %
    assert abs(result.vth - 2.85) < 0.010
    assert abs(result.kp / 2.4 - 1) < 0.03
    assert abs(result.theta - 0.3) < 0.03


def test_level3_auto_choice_is_theta(spice):
    vgs, i_d = _measured(spice, LEVEL3, seed=4)
    result = fit_sweep(vgs, i_d)
    # ngspice level 3 with THETA = 0.3: a plain square law cannot follow the bend
    assert result.model == "theta", result.reason
    assert result.criteria["square"] - result.criteria["theta"] > 10


@pytest.mark.parametrize("card", [LEVEL1, LEVEL3], ids=["level1", "level3"])
def test_vgs_at_250uA_matches_ngspice_operating_point(spice, card):
    vgs, i_d = _measured(spice, card, seed=5)
    result = fit_sweep(vgs, i_d, at_current=250e-6)
    reference = spice.vgs_at(card, 250e-6)  # ngspice: current source + op
    # interpolated in the data and from the fitted curve: both within 1 mV of ngspice
    assert result.vth_cc is not None
    assert abs(result.vth_cc - reference) < 1e-3
    assert abs(result.vgs_at_current - reference) < 1e-3


def test_level1_temperature_sweep_kp_law(spice, tmp_path):
    # ngspice level 1 at 75 degC (TNOM 27 degC): KP scales as (T/TNOM)^-1.5 and VTO stays put
    # (no GAMMA/PHI given); the fitter must see exactly that on the hot curve
    hot = LEVEL1 + "\n.temp 75"
    vgs, i_d = _measured(spice, hot, seed=6)
    result = fit_sweep(vgs, i_d, model="square")
    expected_kp = 1.8 * ((75 + 273.15) / (27 + 273.15)) ** -1.5
    assert abs(result.kp / expected_kp - 1) < 0.03


# Power-MOSFET currents: a 4.7 Ohm series resistor from a 0..6 V supply drives the part to about
# 0.5 A (overdrive up to 0.7 V), where THETA bends the curve by 20 %, not the 4 % of the 470 Ohm line.
R_POWER = 4.7


def _power_sweep(spice, card, seed):
    v_supply, v_part, _ = spice.resistor_sweep(card, resistor=R_POWER, stop=6.0, step=0.01)
    return meter_readings(v_supply, v_part, R_POWER, np.random.default_rng(seed))


def test_level3_theta_card_recovered_at_power_currents(spice):
    vgs, i_d = _power_sweep(spice, LEVEL3, seed=7)
    assert i_d.max() > 0.4  # the sweep really reaches power-MOSFET currents
    result = fit_sweep(vgs, i_d)
    # ngspice level 3 (VTO=2.85 V, KP=2.4 A/V^2, THETA=0.3 1/V): VTO within 10 mV, KP within 3 %
    assert result.model == "theta", result.reason
    assert abs(result.vth - 2.85) < 0.010
    assert abs(result.kp / 2.4 - 1) < 0.03
    assert abs(result.theta - 0.3) < 0.03
    # ngspice has no self-heating and its curve never falls: any such flag here would be false;
    # the meter noise near the detection floor (about 6 uA per reading) must not read as a falling current
    assert result.flags == (), result.notes


def test_level1_source_resistance_appears_as_theta(spice):
    # ngspice level 1 with a source resistance RS: the exact diode-connected current is
    # [1 + KP RS Vov - sqrt(1 + 2 KP RS Vov)] / (KP RS^2), which the THETA law follows with
    # THETA close to KP RS (derived: both agree to first order in KP RS Vov); VTO and KP are untouched
    card = ".model NMOD NMOS (LEVEL=1 VTO=3.0 KP=2.0 RS=0.05)"
    vgs, i_d = _power_sweep(spice, card, seed=8)
    result = fit_sweep(vgs, i_d, model="theta")
    assert abs(result.vth - 3.0) < 0.010
    assert abs(result.kp / 2.0 - 1) < 0.03
    assert result.theta == pytest.approx(2.0 * 0.05, rel=0.1)
    assert "self_heating_drift" not in result.flags and "non_monotonic" not in result.flags


@pytest.mark.parametrize("sweep", [_measured, _power_sweep], ids=["470ohm", "4.7ohm"])
def test_sqrt_extrapolation_threshold_on_a_level1_part(spice, sweep):
    # Ortiz-Conde et al., Microelectronics Reliability 42 (2002) 583, ESR method: on a saturated square
    # law sqrt(ID) is a straight line meeting zero at VT, so the max-slope tangent of ngspice's level-1
    # curve (read with meter noise) must land on VTO = 3.2 V within 2 mV
    vgs, i_d = sweep(spice, LEVEL1, 9)
    result = fit_sweep(vgs, i_d)
    assert abs(result.thresholds["extrapolation_sqrt_max_slope"] - 3.2) < 2e-3


def test_meter_noise_on_a_rising_ngspice_curve_never_reads_as_a_fall(spice):
    # ngspice's level-1 current never falls as VGS rises; 40 noisy readings of it through 4.7 Ohm
    # (about 12 uA of noise per current reading, cut at the 1 uA detection floor) must raise no fall
    v_supply, v_part, _ = spice.resistor_sweep(LEVEL1, resistor=R_POWER, stop=6.0, step=0.01)
    for seed in range(40):
        vgs, i_d = meter_readings(v_supply, v_part, R_POWER, np.random.default_rng(100 + seed))
        assert monotonic_check(vgs[None], i_d[None], np.ones((1, vgs.size), bool)) == [[]], seed
    # while a real 5 % fall at 100 mA is still caught
    k = int(np.searchsorted(i_d, 0.1))
    i_d[k:] *= 0.95
    assert monotonic_check(vgs[None], i_d[None], np.ones((1, vgs.size), bool))[0]
