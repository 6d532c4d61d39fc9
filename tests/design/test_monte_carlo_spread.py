"""The Monte Carlo's draws and what the designer does with them.

A part fitted on a narrow current range has a poorly determined KP and THETA that are almost perfectly correlated:
their ratio (the curve at high current) and the curve near the measured points are known well, each alone is not.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlab.design.montecarlo import perturbed_arrays
from benchlab.design.parts import Part
from benchlab.design.sink import SinkOptions, synthesize_sink
from benchlab.design.verdict import sink_verdict
from benchlab.models import DeviceParams

BASE = {"vth": 2.9, "kp": 2.5, "theta": 0.15}  # a power MOSFET of the usual shape (invented values)
NAMES = ("vth", "kp", "theta")


def _current(params: dict, vgs):
    return DeviceParams("theta", **params).current(vgs)


def _jacobian(vgs) -> np.ndarray:
    # derivatives of I(VGS) by (vth, kp, theta), central differences
    return np.array([(_current({**BASE, n: BASE[n] + 1e-7}, vgs) - _current({**BASE, n: BASE[n] - 1e-7}, vgs)) / 2e-7
                     for n in NAMES]).T


def _fitted_part(v_lo: float, v_hi: float, noise: float) -> tuple[Part, np.ndarray]:
    """The part as a least-squares fit of 20 points in [v_lo, v_hi] with relative noise ``noise`` would report it:
    covariance (J^T W J)^-1 (the textbook least-squares covariance, e.g. Press et al., Numerical Recipes, 15.4)."""
    vgs = np.linspace(v_lo, v_hi, 20)
    jac = _jacobian(vgs)
    sigma = noise * _current(BASE, vgs)
    cov = np.linalg.inv(jac.T @ np.diag(sigma ** -2) @ jac)
    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    stderr = {n: float(sd[k]) for k, n in enumerate(NAMES)}
    stderr.update({f"corr_{NAMES[a]}_{NAMES[b]}": float(corr[a, b]) for a, b in ((0, 1), (0, 2), (1, 2))})
    return Part("N1", DeviceParams("theta", **BASE), stderr=stderr), cov


def test_draws_stay_valid_and_never_collapse_a_poorly_determined_curve():
    # a fit on 40 mV of overdrive with 2 % noise: KP and THETA poorly determined (KP +- 40 %, THETA +- 1800 %) and
    # strongly correlated; some raw normal draws have a negative KP
    part, _ = _fitted_part(2.96, 3.0, 0.02)
    draws = perturbed_arrays(part, 4000, np.random.default_rng(3))
    assert np.all(draws.kp > 1e-9) and np.all(draws.theta >= 0)
    for vgs in (2.96, 2.98, 3.0):
        # clipping KP alone to its bound made some draws carry no current at all (a mirror output at -100 %)
        assert np.min(draws.current(np.full(4000, vgs))) > 0.1 * _current(BASE, vgs)


def test_spread_follows_the_linear_propagation_where_the_law_is_barely_truncated():
    # 0.1 V of overdrive, 0.5 % noise: the draws rarely leave the valid ranges, and the current's spread at the
    # measured points is the law of propagation of uncertainty with correlated inputs (JCGM 100:2008, GUM, 5.2.2):
    # u^2(I) = J C J^T, within the statistical error of 4000 draws and the small truncation
    part, cov = _fitted_part(2.95, 3.05, 0.005)
    draws = perturbed_arrays(part, 4000, np.random.default_rng(3))
    for vgs in (2.95, 3.0, 3.05):
        jac = _jacobian(np.array(vgs))
        spread = np.std(draws.current(np.full(4000, vgs)))
        assert spread == pytest.approx(math.sqrt(jac @ cov @ jac), rel=0.2)


def test_verdict_says_when_the_target_holds_at_nominal_values_only():
    common = dict(worst_error=0.046, worst_part="O1", target=0.05, source_resistor=75.0, in_saturation=True,
                  runaway=None, sensitivity_per_v=0.01, at_current=0.02, outputs=8)
    assert "nominal values only" not in sink_verdict(**common)
    assert "nominal values only" not in sink_verdict(**common, spread_worst=0.049, resistor_tolerance=0.05)
    text = sink_verdict(**common, spread_worst=0.116, resistor_tolerance=0.05)
    assert "nominal values only" in text and "11.6 %" in text and "--series E96" in text
    assert text.startswith("usable")


def _mismatched_set():
    # thresholds 40 mV apart: a plain mirror misses 5 % by far at 20 mA, source resistors fix it
    ref = Part("R", DeviceParams("square", 2.90, kp=1.0))
    outs = [Part(f"O{k}", DeviceParams("square", 2.90 + d, kp=1.0)) for k, d in enumerate((-0.04, 0.02, 0.04))]
    return ref, outs


def test_degeneration_holds_over_the_spread_when_a_monte_carlo_is_asked_for():
    ref, outs = _mismatched_set()
    nominal = synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(series="E96", mismatch_target=0.05, load_voltage=5))
    spread = synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(series="E96", mismatch_target=0.05, load_voltage=5,
                                                                  monte_carlo=400, seed=2))
    assert not nominal.degeneration["over_spread"] and spread.degeneration["over_spread"]
    # holding for 95 % of builds takes at least the nominal choice, and the drawn builds do stay within 5 %
    assert spread.source_resistor >= nominal.source_resistor
    assert spread.monte_carlo["worst_error_p97_5"] <= 0.05
    assert "nominal values only" not in spread.verdict


def test_five_percent_resistors_fall_back_to_the_nominal_choice_and_say_so():
    ref, outs = _mismatched_set()
    design = synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(series="E24", mismatch_target=0.05, load_voltage=5,
                                                                 monte_carlo=400, seed=2))
    if design.degeneration["over_spread"]:
        pytest.fail("5 % source resistors setting the currents cannot hold 5 % in 95 % of builds")
    assert design.worst_error <= 0.05
    assert design.monte_carlo["worst_error_p97_5"] > 0.05
    assert "nominal values only" in design.verdict


def test_absurd_voltages_are_refused_before_any_design():
    # the designer's range ends at the low-voltage limit (1500 V DC, IEC 60038, from memory): 1e300 V used to give
    # a design that the terminal UI could save, reserving its parts
    from benchlab.errors import InputError
    from benchlab.services.design import SinkRequest, design_sink

    with pytest.raises(InputError, match="1500 V"):
        SinkOptions(load_voltage=1e300).validated()
    with pytest.raises(InputError, match="supply must be a positive voltage up to 1500 V"):
        design_sink(SinkRequest(supply=1e300, current=0.02, ref_model="square:vth=2.9,kp=1",
                                out_models=["square:vth=2.9,kp=1"]))
    # the designer itself refuses it too (the Python API calls it directly)
    ref, outs = _mismatched_set()
    for call in (lambda: synthesize_sink(1e300, 0.02, ref, outs), lambda: synthesize_sink(-12.0, 0.02, ref, outs)):
        with pytest.raises(InputError, match="1500 V"):
            call()
