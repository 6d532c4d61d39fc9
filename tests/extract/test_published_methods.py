"""Threshold methods and curve quantities on the examples that define them.

Source for the methods: A. Ortiz-Conde et al., "A review of recent MOSFET threshold voltage
extraction methods", Microelectronics Reliability 42 (2002) 583-596 (ELR/ESR extrapolation,
second derivative, constant current). Source for the subthreshold facts: C. C. Enz,
F. Krummenacher, E. A. Vittoz, Analog Integrated Circuits and Signal Processing 8(1) 83-114
(1995): in weak inversion ID ~ exp(Vov / (n UT)), so gm/ID = 1/(n UT) and the swing is
n UT ln 10 per decade.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlab.extract import fit_sweep, gm_over_id_from_data, gm_over_id_from_params
from benchlab.extract.thresholds import (constant_current_threshold, max_slope_extrapolation,
                                         second_derivative_peak)
from benchlab.models import DeviceParams, thermal_voltage

VT, BETA = 2.0, 0.8


def _linear_region(vgs, vds):
    # ideal long-channel MOSFET at fixed small VDS: saturated for Vov < VDS, linear above
    vov = np.maximum(vgs - VT, 0.0)
    sat = 0.5 * BETA * vov ** 2
    lin = BETA * (vov - vds / 2.0) * vds
    return np.where(vov < vds, sat, lin)


def test_elr_on_linear_region_gives_vt_plus_half_vds():
    # Ortiz-Conde 2002, ELR: the tangent at maximum gm of ID(VGS) at small VDS meets zero at VT + VDS/2
    vds = 0.1
    vgs = np.linspace(1.5, 4.0, 251)
    assert max_slope_extrapolation(vgs, _linear_region(vgs, vds)) == pytest.approx(VT + vds / 2, abs=1e-6)


def test_esr_on_square_law_gives_vt():
    # Ortiz-Conde 2002, ESR: sqrt(ID) of a saturated square law is a line meeting zero at VT
    vgs = np.linspace(2.05, 4.0, 60)
    i_d = 0.5 * BETA * (vgs - VT) ** 2
    assert max_slope_extrapolation(vgs, np.sqrt(i_d)) == pytest.approx(VT, abs=1e-9)


def test_second_derivative_peak_on_linear_region_at_small_vds():
    # Ortiz-Conde 2002, SD method (Wong et al. 1987): d2ID/dVGS2 peaks at VT as VDS -> 0; here the
    # peak sits within the VDS-wide saturated strip just above VT
    vds = 0.01
    vgs = np.linspace(1.5, 3.0, 301)
    peak = second_derivative_peak(vgs, _linear_region(vgs, vds))
    assert peak is not None
    assert VT - 0.005 <= peak <= VT + vds + 0.005


def test_second_derivative_peak_on_sqrt_of_saturation_current():
    # the saturation form: sqrt(ID) is linear above VT and flat below, a kink exactly at VT
    vgs = np.linspace(1.0, 3.0, 201)  # 10 mV grid
    root = np.sqrt(0.5 * BETA) * np.maximum(vgs - 2.003, 0.0)
    peak = second_derivative_peak(vgs, root)
    assert peak == pytest.approx(2.003, abs=0.005)


def test_second_derivative_has_no_peak_when_data_start_above_threshold():
    rng = np.random.default_rng(4)
    vgs = np.linspace(2.2, 3.0, 200)
    root = np.sqrt(0.5 * BETA) * (vgs - VT) * (1 + 1e-4 * rng.standard_normal(vgs.size))
    assert second_derivative_peak(vgs, root) is None


def test_constant_current_threshold_interpolates_and_never_extrapolates():
    # constant-current definition: VGS at ID = Icrit; on a square law VT + sqrt(2 Icrit / KP)
    vgs = np.linspace(2.01, 3.0, 34)  # about 30 mV steps
    i_d = 0.5 * BETA * (vgs - VT) ** 2
    expected = VT + math.sqrt(2 * 250e-6 / BETA)
    # the nearest points are 16x apart in current; the monotone cubic still lands within 1 mV
    assert constant_current_threshold(vgs, i_d, 250e-6) == pytest.approx(expected, abs=1e-3)
    assert constant_current_threshold(vgs, i_d, 1e-6) is None  # below the data
    assert constant_current_threshold(vgs, i_d, 10.0) is None  # above the data


def test_constant_current_flag_when_outside_data():
    vgs = np.linspace(2.3, 3.0, 30)
    i_d = 0.5 * BETA * (vgs - VT) ** 2
    result = fit_sweep(vgs, i_d, model="square", cc_current=250e-6)
    assert result.vth_cc is None
    assert "cc_current_outside_data" in result.flags


def test_gm_over_id_limits():
    # Enz et al. 1995: weak inversion gm/ID = 1/(n UT); strong inversion (square law) gm/ID = 2/Vov
    part = DeviceParams("ekv", vth=2.5, kp=2.0, theta=0.0, n=1.4)
    ut = thermal_voltage()
    weak = gm_over_id_from_params(part, 1e-9)
    assert weak == pytest.approx(1 / (1.4 * ut), rel=1e-3)
    strong_current = 2.0  # Vov ~ 1.4 V: deep strong inversion
    vov = part.vgs_at(strong_current) - 2.5
    assert gm_over_id_from_params(part, strong_current) == pytest.approx(2 / vov, rel=0.02)
    # the same from measured points alone
    currents = np.geomspace(1e-9, 1e-7, 25)
    _, _, from_data = gm_over_id_from_data(part.vgs_at(currents), currents)
    assert np.allclose(from_data, 1 / (1.4 * ut), rtol=0.01)


def test_subthreshold_swing_reported_in_mv_per_decade():
    # Enz et al. 1995: S = n UT ln 10 (89.3 mV/decade for n = 1.5 at 300.15 K)
    part = DeviceParams("ekv", vth=2.7, kp=3.0, theta=0.2, n=1.5)
    currents = np.geomspace(1e-8, 0.2, 60)
    result = fit_sweep(part.vgs_at(currents), currents, model="ekv")
    assert result.n == pytest.approx(1.5, rel=1e-4)
    assert result.slope_mv_per_decade == pytest.approx(1.5 * thermal_voltage() * math.log(10) * 1e3, rel=1e-4)
    # swing measured straight from two points a decade apart deep in weak inversion
    v1, v2 = part.vgs_at(1e-8), part.vgs_at(1e-7)
    assert result.slope_mv_per_decade == pytest.approx((v2 - v1) * 1e3, rel=2e-3)


def test_all_definitions_reported_on_a_full_curve():
    part = DeviceParams("ekv", vth=2.9, kp=2.5, theta=0.25, n=1.5)
    currents = np.geomspace(10e-6, 0.1, 40)
    result = fit_sweep(part.vgs_at(currents), currents)
    assert set(result.thresholds) == {"model", "constant_current", "extrapolation_sqrt_max_slope",
                                      "second_derivative_sqrt"}
    assert result.thresholds["model"] == pytest.approx(2.9, abs=1e-4)
    assert result.thresholds["constant_current"] == pytest.approx(float(part.vgs_at(250e-6)), abs=1e-4)
    # on an EKV curve d2 sqrt(ID) peaks where the interpolation bends, near VT (within 2 n UT)
    assert abs(result.thresholds["second_derivative_sqrt"] - 2.9) < 2 * 1.5 * thermal_voltage()


def test_slope_factor_uses_the_bench_temperature():
    # Enz et al. 1995: weak-inversion slope n UT with UT = kT/q: the same curve read at another
    # temperature gives n scaled by the ratio of temperatures, and the swing in mV/decade is unchanged
    hot = DeviceParams("ekv", vth=2.6, kp=2.0, theta=0.2, n=1.5, temperature_k=350.0)
    currents = np.geomspace(1e-8, 0.2, 50)
    vgs = hot.vgs_at(currents)
    at_350 = fit_sweep(vgs, currents, model="ekv", temperature_k=350.0)
    assumed_27c = fit_sweep(vgs, currents, model="ekv")
    assert at_350.n == pytest.approx(1.5, rel=1e-5)
    assert at_350.params.temperature_k == 350.0
    assert assumed_27c.n == pytest.approx(1.5 * 350.0 / 300.15, rel=1e-4)
    assert assumed_27c.slope_mv_per_decade == pytest.approx(at_350.slope_mv_per_decade, rel=1e-5)
