"""Automatic model choice and the "poorly determined" flag, on ngspice data.

Source of truth: ngspice level 1 (square law, no THETA, no subthreshold current) and level 3 (THETA)
cards of a diode-connected part on a resistor line, read with meter noise in numpy.
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.extract import fit_batch, fit_sweep

from .conftest import meter_readings

pytestmark = pytest.mark.ngspice

R_SERIES = 470.0
LEVEL1 = ".model NMOD NMOS (LEVEL=1 VTO=2.1 KP=0.9)"
LEVEL3 = ".model NMOD NMOS (LEVEL=3 VTO=2.85 KP=2.4 THETA=0.3)"


def _known_sigma(vgs, i_d, kp):
    # each point's current noise as this test makes it (effective variance, Orear, Am. J. Phys. 50 (1982) 912):
    # 0.05 % of reading on both axes plus the meter's 20 uV + 10 ppm on the part's and the supply's voltage (ID
    # from the drop over R), VGS noise seen through gm = sqrt(2 KP ID) (level-1 saturation, ngspice mos1)
    meter_part = 20e-6 + 1e-5 * vgs
    meter_supply = 20e-6 + 1e-5 * (vgs + R_SERIES * i_d)
    sigma_v = np.hypot(5e-4 * vgs, meter_part)
    sigma_i = np.hypot(5e-4 * i_d, np.hypot(meter_part, meter_supply) / R_SERIES)
    return np.hypot(sigma_i, np.sqrt(2.0 * kp * i_d) * sigma_v)


def test_auto_choice_on_level1_never_worse_than_the_square_law(spice):
    v_supply, v_part, _ = spice.resistor_sweep(LEVEL1, resistor=R_SERIES, step=0.05)
    rng = np.random.default_rng(21)
    sweeps = []
    for _ in range(30):
        vgs, i_d = meter_readings(v_supply, v_part, R_SERIES, rng)
        # plus 0.05 % of reading on both axes, so the richer models have noise to chase
        sweeps.append((vgs * (1 + rng.normal(0, 5e-4, vgs.size)), i_d * (1 + rng.normal(0, 5e-4, i_d.size))))
    chosen = []
    for (vgs, i_d), result in zip(sweeps, fit_batch(sweeps)):
        window = (result.window["i_min"], result.window["i_max"])
        square = fit_sweep(vgs, i_d, model="square", window=window)
        # ranked and reported on the same points: the winner fits them at least as well as the square law, judged by
        # chi^2 on the noise this test put in (each fit weights the points by its own estimate of that noise, so
        # their unweighted relative RMS can differ by a few % either way; the bug this guards against, a model
        # ranked on one window and reported on another, gave 20 % RMS against 2 %)
        assert result.window["points"] == square.window["points"]
        inside = (i_d >= window[0]) & (i_d <= window[1])
        sigma = _known_sigma(vgs[inside], i_d[inside], kp=0.9)

        def chi2(fit):
            return float(np.sum(((fit.params.current(vgs[inside]) - i_d[inside]) / sigma) ** 2))

        assert chi2(result) <= chi2(square) * (1 + 1e-6), result.reason
        # ngspice level 1, VTO = 2.1 V: whatever wins, the threshold is the card's
        assert abs(result.vth - 2.1) < 0.01, result.reason
        chosen.append(result.model)
    # a level-1 card has no weak-inversion tail: the square law, or the THETA law where THETA came out above 0
    assert set(chosen) <= {"square", "theta"}


def test_poorly_determined_flag_looks_at_theta(spice):
    v_supply, v_part, _ = spice.resistor_sweep(LEVEL3, resistor=R_SERIES, step=0.05)
    rng = np.random.default_rng(22)
    clean_v, clean_i = meter_readings(v_supply, v_part, R_SERIES, rng)
    vgs, i_d = clean_v * (1 + rng.normal(0, 5e-4, clean_v.size)), clean_i * (1 + rng.normal(0, 5e-4, clean_i.size))
    # 0.05 % noise on both axes over 1-20 mA pins the threshold and KP but not the bend of THETA
    loose = fit_sweep(vgs, i_d, model="theta", window=(1e-3, 2e-2))
    assert loose.stderr["vth"] < 0.5 and loose.stderr["kp"] < 0.5 * loose.kp
    assert loose.stderr["theta"] > 0.5 * loose.theta
    assert "parameters_poorly_determined" in loose.flags
    assert any(note.startswith("standard error above half") and "theta" in note for note in loose.notes)
    # the whole sweep read by a quieter meter does (ngspice THETA = 0.3 1/V)
    full = fit_sweep(clean_v, clean_i, model="theta")
    assert full.stderr["theta"] < 0.5 * full.theta
    assert "parameters_poorly_determined" not in full.flags


def test_auto_reports_the_winner_on_the_window_it_was_ranked_on():
    # a curve with a weak-inversion tail (EKV, n = 1.5) and THETA over eight decades: every candidate is ranked on
    # the whole curve, ekv wins, and the reported fit is that one on those same points, with its slope factor
    # determined (the tail is what fixes n)
    from benchlab.models import DeviceParams

    part = DeviceParams("ekv", vth=2.0, kp=1.0, theta=0.2, n=1.5)
    currents = np.geomspace(1e-8, 0.3, 120)
    rng = np.random.default_rng(23)
    result = fit_sweep(part.vgs_at(currents), currents * (1 + rng.normal(0, 1e-4, currents.size)))
    assert result.model == "ekv", result.reason
    assert result.window["points"] == 120
    assert result.n == pytest.approx(1.5, rel=0.01)
    assert "parameters_poorly_determined" not in result.flags
    # the laws without a weak-inversion tail were ranked on the same points, so they lost by far
    assert "square +" in result.reason and "theta +" in result.reason and "whole curve" in result.reason



def test_auto_choice_on_theta_law_sweeps_is_as_accurate_as_fitting_theta():
    # THETA-law parts (the SPICE level-3 mobility law, THETA ~ 0.1 1/V) swept to 0.1 A, 0.05 % noise on both axes:
    # the THETA term is small on the top two decades, and the unweighted comparison let the noisy low-current
    # points pick the square law for most of them, 1.3 mV off. Ranked on shared effective-variance weights, the
    # automatic choice's median threshold error stays within 1.5x the THETA fit's (which knows the law)
    from benchlab.models import DeviceParams

    rng = np.random.default_rng(5)
    sweeps, truth = [], []
    for _ in range(120):
        part = DeviceParams("theta", vth=float(rng.normal(3.0, 0.15)), kp=float(rng.normal(1.2, 0.1)),
                            theta=float(abs(rng.normal(0.1, 0.03))))
        currents = np.geomspace(1e-4, 0.1, 100)
        sweeps.append((part.vgs_at(currents) * (1 + rng.normal(0, 5e-4, 100)),
                       currents * (1 + rng.normal(0, 5e-4, 100))))
        truth.append(part.vth)
    truth = np.array(truth)
    auto = np.median(np.abs(np.array([r.vth for r in fit_batch(sweeps)]) - truth))
    theta = np.median(np.abs(np.array([r.vth for r in fit_batch(sweeps, model="theta")]) - truth))
    assert auto <= 1.5 * theta, (auto, theta)
