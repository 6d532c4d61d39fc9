"""The worked resistor-line example, and the batched solver against scipy's least-squares fit."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit

from benchlab.extract import fit_batch, fit_sweep
from benchlab.extract.engine import PARAM_NAMES, initial_guess, model_current, solve_batch
from benchlab.models import DeviceParams, solve_resistor_line


def test_linear_part_on_a_resistor_line_settles_where_both_lines_agree():
    # common practice, no published source: Vth = 3.9 V, gm = 0.544 A/V fed from 12 V through 1 kOhm:
    # (12 - V)/1000 = 0.544 (V - 3.9)  ->  V = 2133.6/545 = 3.91486 V, ID = 8.085 mA
    part = DeviceParams("linear", vth=3.9, gm=0.544)
    vgs, i_d = solve_resistor_line(part, 12.0, 1000.0)
    assert vgs == pytest.approx(2133.6 / 545, abs=1e-9)
    assert i_d == pytest.approx(8.085e-3, rel=1e-4)
    resistor_line = (12.0 - vgs) / 1000.0
    device_line = 0.544 * (vgs - 3.9)
    assert resistor_line == pytest.approx(device_line, rel=1e-9)
    # 1 mV off the answer moves the device line by gm x 1 mV = 0.544 mA but the resistor line by 1 uA:
    # the two lines only agree at the exact solution (solve, never round)
    off = vgs + 1e-3
    assert 0.544 * (off - 3.9) - device_line == pytest.approx(0.544e-3, rel=1e-6)
    assert resistor_line - (12.0 - off) / 1000.0 == pytest.approx(1e-6, rel=1e-6)


def test_linear_fit_recovers_the_worked_example_part():
    # a sweep of that part around its operating point, fitted with the linear model, gives back
    # Vth and gm, and the fitted part lands on the same operating point (common practice check)
    part = DeviceParams("linear", vth=3.9, gm=0.544)
    currents = np.linspace(4e-3, 16e-3, 13)
    result = fit_sweep(part.vgs_at(currents), currents, model="linear", at_current=8.085e-3)
    assert result.vth == pytest.approx(3.9, abs=1e-9)
    assert result.gm == pytest.approx(0.544, rel=1e-9)
    _, i_d = solve_resistor_line(result.params, 12.0, 1000.0)
    assert i_d == pytest.approx(8.085e-3, rel=1e-4)


@pytest.mark.parametrize("model, part", [
    ("square", DeviceParams("square", vth=2.7, kp=1.5)),
    ("theta", DeviceParams("theta", vth=3.3, kp=4.0, theta=0.35)),
    ("ekv", DeviceParams("ekv", vth=2.9, kp=2.5, theta=0.2, n=1.6)),
    ("linear", DeviceParams("linear", vth=3.0, gm=0.4)),
])
def test_engine_current_equals_shared_models(model, part):
    vgs = np.linspace(2.0, 5.0, 31)
    p = np.array([[getattr(part, name) for name in PARAM_NAMES[model]]])
    assert np.allclose(model_current(model, vgs[None], p)[0], part.current(vgs), rtol=1e-12, atol=1e-300)


def _theta_law(v, vth, kp, theta):
    q = np.maximum(v - vth, 0.0)
    return 0.5 * kp * q * q / (1 + theta * q)


def test_batched_solver_matches_scipy_curve_fit():
    # outside reference: scipy.optimize.curve_fit (MINPACK Levenberg-Marquardt) on the same relative
    # error model (sigma = measured current) must find the same minimum for every sweep of the batch
    rng = np.random.default_rng(11)
    count = 25
    truth = np.column_stack([rng.uniform(2, 4, count), rng.uniform(0.5, 5, count), rng.uniform(0.05, 0.5, count)])
    vgs = truth[:, :1] + np.linspace(0.02, 1.5, 60)[None, :]
    i_d = model_current("theta", vgs, truth) * (1 + 2e-3 * rng.standard_normal(vgs.shape))
    mask = np.ones_like(vgs)
    start = initial_guess("theta", vgs, i_d, mask)
    batch = solve_batch("theta", vgs, i_d, mask, start)
    assert batch.converged.all()
    for k in range(count):
        ref, _ = curve_fit(_theta_law, vgs[k], i_d[k], p0=start[k], sigma=i_d[k], maxfev=20000)
        assert np.allclose(batch.params[k], ref, rtol=1e-6, atol=1e-9)


def test_batch_of_uneven_sweeps_equals_one_by_one():
    rng = np.random.default_rng(5)
    sweeps = []
    for k, length in enumerate((12, 40, 25)):
        part = DeviceParams("theta", vth=2.5 + 0.2 * k, kp=2.0 + k, theta=0.1 * (k + 1))
        currents = np.geomspace(1e-3, 0.2, length) * (1 + 1e-3 * rng.standard_normal(length))
        sweeps.append((part.vgs_at(np.geomspace(1e-3, 0.2, length)), currents))
    together = fit_batch(sweeps, model="theta")
    for (vgs, i_d), result in zip(sweeps, together):
        alone = fit_sweep(vgs, i_d, model="theta")
        assert result.vth == pytest.approx(alone.vth, abs=1e-9)
        assert result.kp == pytest.approx(alone.kp, rel=1e-8)
        assert result.theta == pytest.approx(alone.theta, rel=1e-6, abs=1e-9)


def test_result_round_trips_through_plain_json():
    import json

    from benchlab.extract import FitResult

    part = DeviceParams("ekv", vth=2.9, kp=2.5, theta=0.3, n=1.5)
    currents = np.geomspace(10e-6, 0.1, 30)
    result = fit_sweep(part.vgs_at(currents), currents * (1 + 1e-3 * np.cos(np.arange(30))), at_current=0.02)
    text = json.dumps(result.to_dict(), allow_nan=False)
    back = FitResult.from_dict(json.loads(text))
    assert back == result


def test_windows_default_and_user():
    part = DeviceParams("theta", vth=3.0, kp=2.0, theta=0.2)
    currents = np.geomspace(1e-6, 1.0, 61)  # six decades, ten points per decade
    vgs = part.vgs_at(currents)
    square_family = fit_sweep(vgs, currents, model="theta")
    assert square_family.window["chosen_by"] == "default"
    assert square_family.window["i_min"] == pytest.approx(1e-2) and square_family.window["points"] == 21
    linear = fit_sweep(vgs, currents, model="linear", at_current=0.1)
    assert 0.05 <= linear.window["i_min"] and linear.window["i_max"] <= 0.2 and linear.window["points"] >= 4
    # a linear model is only a tangent: its gm matches the part's gm at the operating point within a few %
    assert linear.gm == pytest.approx(float(part.gm_at(0.1)), rel=0.05)
    user = fit_sweep(vgs, currents, model="theta", window=(1e-4, 1e-2))
    assert user.window["chosen_by"] == "user" and user.window["points"] == 21
    assert user.vth == pytest.approx(3.0, abs=1e-6)
    ekv = fit_sweep(vgs, currents, model="ekv")
    assert ekv.window["points"] == 61
