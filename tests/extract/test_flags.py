"""Flags that say when not to trust a fit: self-heating, non-monotonic data, thin data."""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.extract import fit_sweep, validate_points
from benchlab.models import DeviceParams

PART = DeviceParams("theta", vth=3.0, kp=3.0, theta=0.2)


def _heated_sweep(rth_k_per_w, tempco=-5e-3, currents=None):
    # a part whose junction warms by Rth * P and whose threshold falls by tempco per kelvin
    # (-2 to -8 mV/K is the datasheet range; Spirito et al., MIEL 2002, for the mechanism)
    currents = np.geomspace(1e-4, 0.4, 40) if currents is None else currents
    vgs = PART.vgs_at(currents)
    for _ in range(50):  # fixed point: VGS depends on temperature, temperature on VGS * ID
        vgs = PART.vgs_at(currents) + tempco * rth_k_per_w * vgs * currents
    return vgs, currents


def test_self_heating_drift_flagged_on_a_hot_sweep():
    # 10 K/W: a small clip-on heat sink (from memory); up to 1.4 W here, so about +14 K at the top
    vgs, ids = _heated_sweep(rth_k_per_w=10.0)
    result = fit_sweep(vgs, ids, model="theta")
    assert "self_heating_drift" in result.flags
    # heating bends the curve upward, so the fitted THETA is pushed onto its bound of zero
    assert "parameter_at_bound" in result.flags and result.theta == 0.0
    # a hotter part has a lower threshold, so at the top it carries MORE current than the curve
    # fitted to the cooler points (threshold falls with temperature: the -2 to -8 mV/K datasheet range)
    note = next(n for n in result.notes if "self-heating" in n)
    assert "carries more current" in note


def test_small_model_mismatch_on_a_quiet_sweep_is_not_called_heating():
    # a series resistance bends the curve a little differently from THETA; on a quiet sweep that
    # 0.1 %-sized trend with power is statistically clear but far too small to be heat
    kp, rs, vth = 2.0, 0.1, 3.0
    vov = np.linspace(0.05, 0.7, 60)
    a = kp * rs * vov
    ids = (1 + a - np.sqrt(1 + 2 * a)) / (kp * rs * rs)  # exact square law behind a source resistor
    rng = np.random.default_rng(9)
    result = fit_sweep(vth + vov, ids * (1 + 1e-5 * rng.standard_normal(vov.size)), model="theta")
    assert result.rms_relative < 2e-3
    assert "self_heating_drift" not in result.flags


def test_no_heating_flags_on_a_cool_sweep():
    rng = np.random.default_rng(3)
    vgs, ids = _heated_sweep(rth_k_per_w=0.0)
    result = fit_sweep(vgs, ids * (1 + 5e-4 * rng.standard_normal(ids.size)), model="theta")
    assert "self_heating_drift" not in result.flags
    assert "self_heating_hysteresis" not in result.flags
    assert result.flags == ()


def test_hysteresis_between_up_and_down_passes():
    currents = np.geomspace(1e-3, 0.2, 25)
    up = PART.vgs_at(currents)
    down = PART.vgs_at(currents) - 0.02  # 20 mV lower on the way back: the part came back hot
    vgs = np.concatenate([up, down[::-1]])
    ids = np.concatenate([currents, currents[::-1]])
    result = fit_sweep(validate_points(vgs, ids, ["up"] * 25 + ["down"] * 25), model="theta")
    assert "self_heating_hysteresis" in result.flags
    assert result.hysteresis_v == pytest.approx(-0.02, abs=1e-3)
    # the fit uses the up pass only (the coolest)
    assert result.vth == pytest.approx(3.0, abs=1e-6)


def test_no_hysteresis_flag_when_passes_agree():
    currents = np.geomspace(1e-3, 0.2, 25)
    v = PART.vgs_at(currents)
    result = fit_sweep(np.concatenate([v, v[::-1][1:]]), np.concatenate([currents, currents[::-1][1:]]),
                       model="theta")
    assert result.hysteresis_v == pytest.approx(0.0, abs=1e-6)
    assert "self_heating_hysteresis" not in result.flags


def test_non_monotonic_current_flagged():
    currents = np.geomspace(1e-3, 0.2, 25)
    vgs = PART.vgs_at(currents)
    ids = currents.copy()
    ids[15] = ids[14] * 0.9  # the current dips while VGS rises
    result = fit_sweep(vgs, ids, model="theta")
    assert "non_monotonic" in result.flags


def _noisy_floor_sweep(rng):
    # a resistor-line sweep read by a meter: about 5 uA of absolute noise on every current, so
    # readings near 50 uA jitter by 10 % while the true current only rises
    currents = np.geomspace(50e-6, 0.3, 300)
    return PART.vgs_at(currents), currents + 5e-6 * rng.standard_normal(currents.size)


def test_meter_noise_near_the_floor_is_not_a_falling_current():
    vgs, ids = _noisy_floor_sweep(np.random.default_rng(12))
    assert np.any(np.diff(ids) < -0.02 * ids[:-1])  # the naive 2 % rule would fire
    assert "non_monotonic" not in fit_sweep(vgs, ids, model="theta").flags


def test_a_real_fall_is_still_flagged_in_a_noisy_sweep():
    vgs, ids = _noisy_floor_sweep(np.random.default_rng(12))
    ids[200:] *= 0.9  # a contact or a part letting go: 10 % less current from here on
    assert "non_monotonic" in fit_sweep(vgs, ids, model="theta").flags


@pytest.mark.parametrize("points, where", [(10, 3), (10, 7), (25, 5), (25, 15)])
def test_a_dip_in_a_short_clean_sweep_is_flagged(points, where):
    # a coarse sweep's own curvature must not be taken for noise that would excuse a 5 % dip
    currents = np.geomspace(1e-3, 0.2, points)
    ids = currents.copy()
    ids[where] = ids[where - 1] * 0.95
    assert "non_monotonic" in fit_sweep(PART.vgs_at(currents), ids, model="theta").flags


def test_thin_data_flagged():
    currents = np.geomspace(20e-3, 40e-3, 6)  # a third of a decade
    result = fit_sweep(PART.vgs_at(currents), currents, model="theta")
    assert "current_range_too_narrow" in result.flags


def test_few_points_above_threshold_flagged():
    currents = np.array([5e-3, 1e-2, 2e-2, 4e-2])
    result = fit_sweep(PART.vgs_at(currents), currents, model="square")
    assert "few_points_above_threshold" in result.flags


def test_poor_fit_flagged_when_model_cannot_follow_data():
    # a weak-inversion exponential forced through a square law
    part = DeviceParams("ekv", vth=3.0, kp=3.0, theta=0.0, n=1.5)
    currents = np.geomspace(1e-7, 1e-1, 40)
    result = fit_sweep(part.vgs_at(currents), currents, model="square", window=(1e-7, 1e-1))
    assert "poor_fit" in result.flags


def test_notes_explain_every_flag():
    currents = np.geomspace(20e-3, 40e-3, 6)
    result = fit_sweep(PART.vgs_at(currents), currents, model="theta")
    assert len(result.notes) >= len(result.flags) > 0
    assert all(isinstance(note, str) and note for note in result.notes)
