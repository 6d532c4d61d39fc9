"""Checks of the shared drain-current models (benchlab/models.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlab.models import DeviceParams, saturation_current, solve_resistor_line, thermal_voltage


def test_thermal_voltage_at_300k():
    # kT/q = 25.85 mV at 300 K (CODATA k and e; handbook value)
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, rel=1e-4)


def test_linear_part_on_resistor_line_crosses_exactly():
    # common practice, no published source: Vth = 3.9 V, gm = 0.544 A/V from 12 V through 1 kOhm
    # settles at VGS = 2133.6/545 V and ID = 8.085 mA, where the resistor line meets the device line.
    part = DeviceParams("linear", vth=3.9, gm=0.544)
    vgs, i_d = solve_resistor_line(part, 12.0, 1000.0)
    assert vgs == pytest.approx(2133.6 / 545, abs=1e-9)
    assert i_d == pytest.approx(8.085e-3, abs=1e-6)
    assert (12.0 - vgs) / 1000.0 == pytest.approx(float(part.current(vgs)), rel=1e-9)
    # The rounded hand value (8.5 mA) satisfies neither line at once.
    assert abs((12.0 - 3.916) / 1000.0 - 8.5e-3) > 4e-4


def test_square_law_matches_spice_level1_equation():
    # SPICE level-1 saturation current ID = KP/2 (VGS - VTO)^2 with W = L = 1 (ngspice mos1load.c)
    part = DeviceParams("square", vth=2.5, kp=1.0)
    assert float(part.current(3.5)) == pytest.approx(0.5)
    assert float(part.current(2.0)) == 0.0


def test_ekv_reaches_both_inversion_limits():
    # Enz, Krummenacher, Vittoz, Analog Integrated Circuits and Signal Processing 8 (1995) 83-114:
    # strong inversion -> square law; weak inversion -> exp(Vov / (n UT)), swing n UT ln 10 per decade.
    n, kp, vth = 1.4, 2.0, 3.0
    ekv = DeviceParams("ekv", vth=vth, kp=kp, n=n)
    square = DeviceParams("square", vth=vth, kp=kp)
    assert float(ekv.current(vth + 2.0)) == pytest.approx(float(square.current(vth + 2.0)), rel=1e-6)
    ut = ekv.ut
    v1, v2 = vth - 0.8, vth - 0.7
    swing = (v2 - v1) / math.log10(float(ekv.current(v2)) / float(ekv.current(v1)))
    assert swing == pytest.approx(n * ut * math.log(10), rel=1e-3)


@pytest.mark.parametrize(
    "params",
    [
        DeviceParams("linear", vth=3.9, gm=0.544),
        DeviceParams("square", vth=2.1, kp=0.8),
        DeviceParams("theta", vth=3.0, kp=5.0, theta=0.2),
        DeviceParams("ekv", vth=3.2, kp=3.0, theta=0.1, n=1.5),
    ],
    ids=lambda p: p.model,
)
def test_inverse_and_transconductance_are_consistent(params):
    currents = np.logspace(-4, 0, 9)
    vgs = params.vgs_at(currents)
    np.testing.assert_allclose(params.current(vgs), currents, rtol=1e-9)
    # gm equals the numerical derivative of the current (central difference)
    h = 1e-6
    numeric = (params.current(vgs + h) - params.current(vgs - h)) / (2 * h)
    np.testing.assert_allclose(params.gm_at(currents), numeric, rtol=1e-5)


def test_square_law_transconductance_is_2i_over_overdrive():
    # Square law: gm / ID = 2 / (VGS - Vth) (Sedra & Smith, Microelectronic Circuits, MOSFET small-signal model)
    part = DeviceParams("square", vth=2.0, kp=1.0)
    i_d = 0.1
    assert float(part.gm_at(i_d)) == pytest.approx(2 * i_d / (float(part.vgs_at(i_d)) - 2.0))


def test_theta_bends_toward_linear():
    # Mobility degradation: ID = KP/2 Vov^2 / (1 + THETA Vov) grows ~linearly at large Vov
    part = DeviceParams("theta", vth=2.0, kp=2.0, theta=1.0)
    i10, i20 = part.current(np.array([12.0, 22.0]))
    assert i20 / i10 == pytest.approx((400 / 21) / (100 / 11), rel=1e-12)
    assert i20 / i10 < 2.2


def test_temperature_moves_threshold_down_and_kp_down():
    # KP ~ (T/T0)^-1.5: the SPICE level-1 mobility temperature law (ngspice manual, MOSFET temperature effects)
    part = DeviceParams("square", vth=3.0, kp=2.0)
    hot = part.with_temperature(part.temperature_k + 50, vth_tempco=-5e-3)
    assert hot.vth == pytest.approx(2.75)
    assert hot.kp == pytest.approx(2.0 * ((part.temperature_k + 50) / part.temperature_k) ** -1.5)


def test_params_round_trip_through_plain_data():
    part = DeviceParams("ekv", vth=3.2, kp=3.0, theta=0.1, n=1.5)
    assert DeviceParams.from_dict(part.to_dict()) == part


@pytest.mark.parametrize("bad", [dict(model="cubic", vth=1.0, kp=1.0), dict(model="square", vth=1.0, kp=0.0),
                                 dict(model="linear", vth=1.0), dict(model="ekv", vth=1.0, kp=1.0, n=0.5)])
def test_bad_params_are_refused(bad):
    with pytest.raises(ValueError):
        DeviceParams(**bad)


def test_saturation_current_is_zero_below_threshold_without_slope_factor():
    assert float(saturation_current(1.0, 2.0, 1.0)) == 0.0
