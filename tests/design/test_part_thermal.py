"""Each part's own thermal values in the designer: sources, ZTC, drift, loop gain and the runaway verdict."""

from __future__ import annotations

import pytest

from benchlab.design.part_thermal import id_at_two_temperatures, thermal_values
from benchlab.design.parts import Part
from benchlab.design.sink import SinkOptions, analyze_sink
from benchlab.models import DeviceParams

T0 = 300.0


def _square(vth, kp=0.5, label="Q", thermal=None):
    return Part(label=label, params=DeviceParams(model="square", vth=vth, kp=kp, temperature_k=T0),
                thermal=thermal or {})


def _measured(**values):
    return {k: {"value": v, "stderr": None, "measured_at": "2026-12-02T00:00:00"} for k, v in values.items()}


def test_ztc_of_a_square_law_part_follows_the_derived_formula():
    # thermal.md (derived): with ID ~ T^-m (VGS - Vth(T))^2, dID/dT = 0 at Vov = 2 |a| T / m (2 V here); the
    # curves at T0 and T1 = T0 + 10 K cross exactly where Vov + |a| dT = Vov (T1/T0)^(m/2) (derived, same law)
    params = DeviceParams(model="square", vth=2.0, kp=0.5, temperature_k=T0)
    values = thermal_values("Q", params, _measured(vth_tempco=-5e-3, kp_exponent=1.5))
    assert values.ztc_vgs - 2.0 == pytest.approx(5e-3 * 10.0 / ((T0 + 10.0) / T0) ** 0.75 / (1 - (T0 / (T0 + 10.0))
                                                                                             ** 0.75), rel=1e-4)
    assert values.ztc_vgs - 2.0 == pytest.approx(2 * 5e-3 * T0 / 1.5, rel=0.01)
    assert values.sources["vth_tempco"].startswith("measured") and values.sources["rth"].startswith("default")
    figure = id_at_two_temperatures(params, values, T0, T0 + 40.0)
    low = [i for v, i in zip(figure["vgs"], figure["id_low"]) if v < figure["ztc_vgs"] - 0.2][-1]
    high = [i for v, i in zip(figure["vgs"], figure["id_high"]) if v < figure["ztc_vgs"] - 0.2][-1]
    assert high > low  # below the ZTC point the hot curve carries more (Spirito et al., MIEL 2002)


def test_sink_uses_each_parts_measured_tempco_for_its_drift():
    a_out = -7e-3
    ref = _square(2.0, label="R")
    out = _square(2.0, label="O", thermal=_measured(vth_tempco=a_out, kp_exponent=1.5))
    design = analyze_sink(12.0, 470.0, ref, [out], SinkOptions(load_voltage=5.0))
    o = design.outputs[0]
    vov = o.vgs - 2.0
    # derived: at a fixed gate voltage d ln I / dT = -m/T - 2 a / Vov (square law, 1 K step: 0.5 % tolerance)
    assert o.tc_fixed_vgs == pytest.approx(-1.5 / T0 - 2 * a_out / vov, rel=0.01)
    sources = {tv["part"]: tv["sources"] for tv in design.thermal}
    assert sources["O"]["vth_tempco"].startswith("measured")
    assert sources["R"]["vth_tempco"].startswith("default assumption")
    assert "below ZTC" in o.ztc


def test_runaway_verdict_follows_rth_and_heatsink():
    ref = _square(2.0, kp=2.0, label="R")
    hot = _square(2.0, kp=2.0, label="O", thermal=_measured(vth_tempco=-6e-3, rth=2.0))
    calm = analyze_sink(12.0, 220.0, ref, [hot], SinkOptions(load_voltage=10.0))
    assert not calm.runaway["runaway"] and calm.self_heating is not None  # measured Rth: solved by default
    # loop gain = Rth x V x dI/dT (derived): a large heat-sink figure pushes it past 1
    sunk = analyze_sink(12.0, 220.0, ref, [hot], SinkOptions(load_voltage=10.0, heatsink_k_per_w=400.0))
    o = sunk.outputs[0]
    assert o.loop_gain == pytest.approx(402.0 * 10.0 * o.tc_fixed_vgs * o.i_out, rel=0.02)
    assert sunk.runaway["runaway"] and "RUNAWAY" in sunk.runaway["verdict"]


def test_matching_with_tempco_prefers_parts_that_drift_together():
    from benchlab.design.matching import current_grid, match_sets

    ref = _square(2.0, label="R", thermal=_measured(vth_tempco=-5e-3))
    twin = _square(2.0, label="A", thermal=_measured(vth_tempco=-8e-3))  # same curve now, drifts 3 mV/K apart
    near = _square(2.0, kp=0.505, label="B", thermal=_measured(vth_tempco=-5e-3))  # 1 % apart, drifts alike
    parts = [ref, twin, near]
    cold = match_sets(parts, current_grid(0.02), 2, count=1)
    warm = match_sets(parts, current_grid(0.02), 2, count=1, warm_k=40.0)
    assert {cold.sets[0].ref, *cold.sets[0].outputs} == {"R", "A"}
    assert {warm.sets[0].ref, *warm.sets[0].outputs} == {"R", "B"}


def test_report_figure_marks_the_ztc_point():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from benchlab.report.thermal_figure import plot_id_two_temperatures

    params = DeviceParams(model="square", vth=2.0, kp=0.5, temperature_k=T0)
    values = thermal_values("Q", params, {})
    data = id_at_two_temperatures(params, values, T0, T0 + 50.0)
    fig, ax = plt.subplots()
    plot_id_two_temperatures(ax, data, "Q")
    marker = [line for line in ax.get_lines() if line.get_marker() == "o"][0]
    assert marker.get_xdata()[0] == pytest.approx(data["ztc_vgs"])
    # the marked point is where the two drawn curves meet (both evaluated there)
    cold, hot = values.at(params, T0), values.at(params, T0 + 50.0)
    assert float(cold.current(data["ztc_vgs"])) == pytest.approx(float(hot.current(data["ztc_vgs"])), rel=1e-6)
    plt.close(fig)
