"""Self-heating steady state of a sink."""

import pytest

from benchlab.design.mirror import solve_mirror
from benchlab.design.parts import Part
from benchlab.design.sink import SinkOptions, synthesize_sink
from benchlab.design.thermal import self_heated_point
from benchlab.models import DeviceParams


def test_steady_state_is_self_consistent():
    ref = DeviceParams("theta", 3.0, kp=1.0, theta=0.1)
    outs = [DeviceParams("theta", 3.0, kp=1.0, theta=0.1), DeviceParams("theta", 3.02, kp=0.98, theta=0.1)]
    state = self_heated_point(24.0, 68.0, ref, outs, 6.0, 8.0)
    assert not state.runaway
    # every rise equals the part's own dissipation times Rth at the returned operating point (energy balance)
    hot = [p.with_temperature(p.temperature_k + dt) for p, dt in zip([ref, *outs], [state.ref_rise, *state.output_rise])]
    point = solve_mirror(24.0, 68.0, hot[0], hot[1:])
    assert state.i_ref == pytest.approx(point.i_ref, rel=1e-9)
    assert state.ref_rise == pytest.approx(point.vgs_ref * point.i_ref * 8.0, abs=1e-3)
    for rise, i_out in zip(state.output_rise, point.i_out):
        assert rise == pytest.approx(6.0 * i_out * 8.0, abs=1e-3)


def test_at_the_zero_tc_point_self_heating_does_not_move_the_outputs():
    # Square law, KP ~ T^-1.5, dVT/dT = -5 mV/K: at Vov = 2 alpha T / 1.5 (derived, about 2.0 V at 300 K)
    # the current is first-order independent of temperature (Spirito et al., MIEL 2002, describe the point).
    vov = 2 * 5e-3 * 300.15 / 1.5
    part = DeviceParams("square", 2.0, kp=0.5)
    current = 0.25 * vov ** 2
    supply = 40.0
    resistor = (supply - 2.0 - vov) / current
    cold = solve_mirror(supply, resistor, part, [part])
    state = self_heated_point(supply, resistor, part, [part], 5.0, 3.0)
    assert state.output_rise[0] > 10.0  # it does heat up
    assert state.i_out[0] == pytest.approx(cold.i_out[0], rel=2e-3)
    # far below that point the same heating raises the current markedly
    low = DeviceParams("square", 2.0, kp=20.0)
    cold_low = solve_mirror(supply, resistor, low, [low])
    hot_low = self_heated_point(supply, resistor, low, [low], 5.0, 3.0)
    assert hot_low.i_out[0] > cold_low.i_out[0] * 1.02


def test_runaway_is_reported_and_cautioned():
    ref = Part("R", DeviceParams("theta", 3.0, kp=1.0, theta=0.1))
    outs = [Part("A", DeviceParams("theta", 3.0, kp=1.0, theta=0.1))]
    hot = synthesize_sink(24.0, 0.3, ref, outs, SinkOptions(load_voltage=6.0, thermal_resistance=62.0))
    assert hot.self_heating["runaway"] is True
    assert any("THERMAL RUNAWAY" in c for c in hot.cautions)
    mild = synthesize_sink(24.0, 0.3, ref, outs, SinkOptions(load_voltage=6.0, thermal_resistance=2.0))
    assert mild.self_heating["runaway"] is False
    # the reference dissipates VGS x I, each output 6 V x I: outputs run hotter and conduct more
    assert mild.self_heating["output_rise"][0] > mild.self_heating["ref_rise"]
    assert mild.self_heating["error"][0] > 0
    assert any("Self-heating at 2 K/W" in c for c in mild.cautions)
