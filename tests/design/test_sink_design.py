"""Current-sink synthesis and analysis against hand algebra, the square-law mismatch formula and the
threshold temperature law."""

import math

import numpy as np
import pytest

from benchlab.design.eseries import nearest_preferred, series_values
from benchlab.design.mirror import solve_mirror
from benchlab.design.parts import Part, parse_inline_model
from benchlab.design.sink import SinkOptions, analyze_sink, synthesize_sink
from benchlab.errors import DesignError, InputError
from benchlab.models import DeviceParams, solve_resistor_line


def sq(label, vth, kp, theta=0.0):
    model = "theta" if theta else "square"
    return Part(label, DeviceParams(model, vth, kp=kp, theta=theta))


def test_linear_part_on_12v_through_1k_exact_crossing():
    # Common practice, no published source: Vth = 3.9 V, gm = 0.544 A/V, 12 V through 1 kOhm.
    # Exact crossing of (12 - V)/1000 = 0.544 (V - 3.9): V = 2133.6/545 = 3.91486 V, ID = 8.085 mA.
    ref = parse_inline_model("vth=3.9,gm=0.544", "REF")
    design = analyze_sink(12.0, 1000.0, ref, [])
    assert design.vgs == pytest.approx(2133.6 / 545, abs=1e-9)
    assert design.vgs == pytest.approx(3.91486, abs=5e-6)
    assert design.i_ref == pytest.approx(8.085e-3, abs=5e-7)
    # both lines agree at the answer
    resistor_line = (12.0 - design.vgs) / 1000.0
    device_line = 0.544 * (design.vgs - 3.9)
    assert resistor_line == pytest.approx(device_line, rel=1e-10)
    assert design.i_ref == pytest.approx(resistor_line, rel=1e-10)
    # the rounded hand value 8.5 mA is not a solution: the device needs 3.91563 V for it, where the
    # resistor line only passes 8.084 mA (and at the resistor line's 3.5 V the part does not conduct)
    v_device = 3.9 + 8.5e-3 / 0.544
    assert abs((12.0 - v_device) / 1000.0 - 8.5e-3) > 0.4e-3
    assert 0.544 * max(12.0 - 8.5e-3 * 1000.0 - 3.9, 0.0) == 0.0


@pytest.mark.parametrize("dvth,dkp_rel", [(0.002, 0.0), (0.0, 0.01), (-0.003, 0.015), (0.004, -0.02)])
def test_mirror_mismatch_matches_the_square_law_formula(dvth, dkp_rel):
    # Pelgrom, Duinmaijer, Welbers, IEEE JSSC 24(5) 1989: in saturation dI/I = dKP/KP - 2 dVT/(VGS - VT)
    # (a higher threshold gives less current); exact solve must agree to second order.
    ref = sq("R", 2.5, 0.8)
    out = sq("O", 2.5 + dvth, 0.8 * (1 + dkp_rel))
    design = analyze_sink(12.0, 200.0, ref, [out], SinkOptions(load_voltage=6.0))
    vov = design.vgs - 2.5
    predicted = dkp_rel - 2.0 * dvth / vov
    assert design.outputs[0].error == pytest.approx(predicted, abs=3 * (predicted ** 2) + 1e-12)
    if dvth > 0 and dkp_rel == 0:
        assert design.outputs[0].error < 0


@pytest.mark.parametrize("rs,dvth,dkp_rel", [(4.7, 0.02, 0.0), (10.0, -0.015, 0.02), (22.0, 0.01, -0.01)])
def test_degenerated_mirror_mismatch_matches_the_source_resistor_form(rs, dvth, dkp_rel):
    # Small-signal algebra on the square law with a resistor R in each source (derived, common practice):
    # dI/I = [dKP/KP - (2/Vov) dVT] / (1 + gm R).
    ref = sq("R", 2.5, 0.8)
    out = sq("O", 2.5 + dvth, 0.8 * (1 + dkp_rel))
    design = analyze_sink(12.0, 100.0, ref, [out], SinkOptions(load_voltage=8.0, source_resistor_ohm=rs))
    vov = design.vgs - 2.5
    gm = 0.8 * vov
    predicted = (dkp_rel - 2.0 * dvth / vov) / (1.0 + gm * rs)
    assert design.outputs[0].error == pytest.approx(predicted, rel=0.05)
    plain = analyze_sink(12.0, 100.0, ref, [out], SinkOptions(load_voltage=8.0))
    assert abs(design.outputs[0].error) < abs(plain.outputs[0].error)


def test_source_resistor_exact_law_for_the_reference():
    # Square law with Rs alone (derived): ID = [1 + KP Rs Vov - sqrt(1 + 2 KP Rs Vov)] / (KP Rs^2), where
    # Vov is the gate overdrive against ground; check our output solve with it.
    out = sq("O", 2.0, 0.6)
    point = solve_mirror(12.0, 150.0, sq("R", 2.1, 0.7).params, [out.params], 8.2)
    vov = point.vg - 2.0
    kp, rs = 0.6, 8.2
    expected = (1 + kp * rs * vov - math.sqrt(1 + 2 * kp * rs * vov)) / (kp * rs ** 2)
    assert point.i_out[0] == pytest.approx(expected, rel=1e-9)


def test_synthesis_picks_the_nearest_e24_and_recomputes():
    ref = sq("R", 2.8, 1.1, theta=0.2)
    outs = [sq("A", 2.81, 1.08, 0.2), sq("B", 2.79, 1.12, 0.2)]
    design = synthesize_sink(24.0, 0.35, ref, outs, SinkOptions(load_voltage=6.0))
    # IEC 60063 E24 nearest on a log scale
    assert design.r_chosen == nearest_preferred(design.r_exact, "E24")
    assert design.r_chosen in series_values("E24", 1.0, 1e6)
    # the exact resistor gives the target exactly; the chosen one gives the exact solve at that value
    at_exact = analyze_sink(24.0, design.r_exact, ref, outs)
    assert at_exact.i_ref == pytest.approx(0.35, rel=1e-9)
    vgs, i_d = solve_resistor_line(ref.params, 24.0, design.r_chosen)
    assert design.i_ref == pytest.approx(i_d, rel=1e-12) and design.vgs == pytest.approx(vgs, abs=1e-12)
    # power bookkeeping: P = V I for each element (diode-connected reference: VDS = VGS)
    assert design.p_ref == pytest.approx(design.vgs * design.i_ref)
    assert design.p_resistor == pytest.approx(design.i_ref ** 2 * design.r_chosen)
    for o in design.outputs:
        assert o.p_part == pytest.approx(6.0 * o.i_out)
    e96 = synthesize_sink(24.0, 0.35, ref, outs, SinkOptions(series="E96"))
    assert abs(e96.i_ref / 0.35 - 1) <= abs(design.i_ref / 0.35 - 1) + 1e-12


def test_compliance_is_overdrive_plus_margin_and_flags_low_load():
    ref, out = sq("R", 2.5, 0.8), sq("O", 2.52, 0.8)
    design = analyze_sink(12.0, 100.0, ref, [out], SinkOptions(load_voltage=0.3, compliance_margin_v=0.25))
    o = design.outputs[0]
    # saturation needs VDS >= VGS - Vth (square law; common practice), plus the stated margin
    assert o.v_compliance == pytest.approx(o.vgs - 2.52 + 0.25)
    assert not o.in_compliance
    assert any("Compliance" in c and "O" in c for c in design.cautions)


def test_supply_sensitivity_matches_a_finite_difference():
    ref, out = sq("R", 2.5, 0.8, 0.1), sq("O", 2.55, 0.85, 0.1)
    opts = SinkOptions(source_resistor_ohm=3.3)
    design = analyze_sink(15.0, 220.0, ref, [out], opts)
    h = 1e-4
    up = analyze_sink(15.0 + h, 220.0, ref, [out], opts)
    down = analyze_sink(15.0 - h, 220.0, ref, [out], opts)
    assert design.di_ref_dvsupply == pytest.approx((up.i_ref - down.i_ref) / (2 * h), rel=1e-5)
    assert design.outputs[0].di_dvsupply == pytest.approx((up.outputs[0].i_out - down.outputs[0].i_out) / (2 * h),
                                                          rel=1e-5)


def test_temperature_coefficient_changes_sign_at_the_zero_tc_point():
    # Square law with KP ~ T^-1.5 (SPICE level-1 law) and dVT/dT = -5 mV/K: at a fixed gate voltage the
    # current does not move at Vov = 2 alpha T / 1.5 (derived), about 2.0 V at 300 K; below it a hotter
    # part conducts more (Spirito et al., MIEL 2002, thermal instability of power MOSFETs in linear mode).
    ztc = 2 * 5e-3 * 300.15 / 1.5
    for vov, positive in ((0.5 * ztc, True), (0.9 * ztc, True), (1.1 * ztc, False), (1.5 * ztc, False)):
        ref = sq("R", 2.0, 0.5)
        current = 0.25 * vov ** 2
        design = synthesize_sink(40.0, current, ref, [sq("O", 2.0, 0.5)], SinkOptions(series="E192"))
        o = design.outputs[0]
        assert (o.tc_fixed_vgs > 0) == positive
    runaway = synthesize_sink(12.0, 0.05, sq("R", 2.0, 0.5), [sq("O", 2.0, 0.5)])
    assert any("Thermal runaway" in c and "per K" in c for c in runaway.cautions)


def test_degeneration_suggestion_is_the_smallest_preferred_value_meeting_the_target():
    ref = sq("R", 2.5, 0.8, 0.1)
    outs = [sq("A", 2.56, 0.8, 0.1), sq("B", 2.47, 0.82, 0.1)]
    design = synthesize_sink(12.0, 0.1, ref, outs, SinkOptions(mismatch_target=0.01, load_voltage=10.0))
    rs = design.degeneration["suggested_ohm"]
    assert design.source_resistor == rs and design.worst_error <= 0.01
    assert design.degeneration["worst_error_without"] > 0.01
    smaller = [v for v in series_values("E24", 0.1, rs) if v < rs]
    below = synthesize_sink(12.0, 0.1, ref, outs, SinkOptions(source_resistor_ohm=smaller[-1], load_voltage=10.0))
    assert below.worst_error > 0.01
    # with only 5 V across the sink, the source drop needed pushes the outputs out of saturation first
    with pytest.raises(DesignError, match="best"):
        synthesize_sink(12.0, 0.1, ref, outs, SinkOptions(mismatch_target=0.01, load_voltage=5.0))
    with pytest.raises(DesignError):
        synthesize_sink(5.0, 0.5, ref, [sq("C", 3.5, 0.8)], SinkOptions(mismatch_target=0.001))


def test_degeneration_search_never_picks_a_value_that_takes_the_outputs_out_of_saturation():
    # EKV fits have no triode form, so out of compliance their current would stay at the saturation
    # value: a search judged on that error alone once chose 390 ohm at 20 mA with 3 V across each
    # output (7.8 V of source drop, a physically impossible design). Kirchhoff: the source drop
    # I Rs cannot exceed the voltage across the output branch (common practice).
    def ekv(label, vth, kp):
        return Part(label, DeviceParams("ekv", vth, kp=kp, theta=0.1, n=1.4))

    ref = ekv("R", 2.8, 2.0)
    outs = [ekv("A", 2.9, 2.2), ekv("B", 2.7, 1.8)]
    # with the whole supply across the outputs the search meets 2 % (the control case)
    roomy = synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(mismatch_target=0.02, load_voltage=12.0))
    assert roomy.worst_error <= 0.02 and roomy.source_resistor * 0.02 > 3.0
    assert all(o.in_compliance for o in roomy.outputs)
    # with 3 V the same target would need a source drop the outputs cannot have: one clear error
    with pytest.raises(DesignError, match="out of saturation"):
        synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(mismatch_target=0.02, load_voltage=3.0))
    # with 0.1 V the outputs are out of saturation before any source resistor: the error says that instead
    with pytest.raises(DesignError, match="even without a source resistor"):
        synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(mismatch_target=0.02, load_voltage=0.1))
    # a target reachable within compliance is met with every output in saturation
    reachable = synthesize_sink(12.0, 0.02, ref, outs, SinkOptions(mismatch_target=0.5, load_voltage=3.0))
    assert all(o.in_compliance for o in reachable.outputs)
    assert reachable.source_resistor * 0.02 < 3.0 and reachable.worst_error <= 0.5


def test_monte_carlo_is_seeded_and_follows_the_mismatch_propagation():
    # Pelgrom et al. (IEEE JSSC 1989): sigma(dI/I) = 2 sigma(dVT) / Vov for threshold spread alone; with two
    # independent parts each of sigma s, dVT has sigma s sqrt(2).
    s = 0.004
    ref = Part("R", DeviceParams("square", 2.5, kp=0.8), stderr={"vth": s})
    out = Part("O", DeviceParams("square", 2.5, kp=0.8), stderr={"vth": s})
    opts = SinkOptions(monte_carlo=4000, seed=7, resistor_tolerance=0.0, load_voltage=6.0)
    design = analyze_sink(12.0, 100.0, ref, [out], opts)
    vov = design.vgs - 2.5
    sigma = design.monte_carlo["outputs"][0]["error"]["std"]
    assert sigma == pytest.approx(2 * s * math.sqrt(2) / vov, rel=0.08)
    again = analyze_sink(12.0, 100.0, ref, [out], opts)
    assert again.monte_carlo == design.monte_carlo
    # resistor tolerance alone: i_ref stays between the exact solves at R(1 -/+ tol)
    plain = [Part("R", ref.params), Part("O", out.params)]
    tol = analyze_sink(12.0, 100.0, plain[0], plain[1:], SinkOptions(monte_carlo=500, resistor_tolerance=0.05))
    lo = solve_resistor_line(ref.params, 12.0, 105.0)[1]
    hi = solve_resistor_line(ref.params, 12.0, 95.0)[1]
    spread = tol.monte_carlo["i_ref"]
    assert lo <= spread["min"] <= spread["max"] <= hi
    assert tol.monte_carlo["outputs"][0]["error"]["std"] < 1e-9


def test_cautions_carry_this_designs_numbers_and_the_deference():
    design = synthesize_sink(24.0, 0.3, sq("R", 3.0, 1.0), [sq("O", 3.0, 1.0)], SinkOptions(load_voltage=10.0))
    text = " ".join(design.cautions)
    assert f"{design.outputs[0].p_part:.2f} W" in text
    for needle in ("heat sink", "Spirito", "Start-up", "laser", "IEC 62471", "licensed practice"):
        assert needle in text
    assert design.to_dict()["cautions"] == list(design.cautions)


def test_json_shape_has_the_documented_keys():
    design = synthesize_sink(12.0, 0.02, sq("R", 2.5, 0.8), [sq("O", 2.5, 0.8)])
    data = design.to_dict()
    for key in ("supply", "r_exact", "r_chosen", "series", "vgs", "i_ref", "outputs", "cautions"):
        assert key in data
    for key in ("part", "i_out", "error", "v_compliance", "p_part"):
        assert key in data["outputs"][0]
    import json
    json.dumps(data, allow_nan=False)


def test_bad_requests_raise_one_clear_error():
    ref = sq("R", 2.5, 0.8)
    with pytest.raises(DesignError, match="cannot drive"):
        synthesize_sink(2.6, 1.0, ref, [])
    with pytest.raises(InputError):
        analyze_sink(12.0, 100.0, ref, [ref])
    with pytest.raises(InputError):
        synthesize_sink(12.0, 0.01, ref, [], SinkOptions(series="E25"))
    with pytest.raises(DesignError):
        analyze_sink(12.0, -5.0, ref, [])


def test_monte_carlo_accepts_unknown_standard_errors_from_the_fitter():
    # the fitter reports None where a standard error does not apply; those parameters are held fixed
    ref = Part("R", DeviceParams("theta", 2.5, kp=0.8, theta=0.1), stderr={"vth": 0.003, "theta": None, "n": None})
    out = Part("O", DeviceParams("theta", 2.51, kp=0.8, theta=0.1), stderr={"vth": None, "kp": 0.0})
    design = analyze_sink(12.0, 100.0, ref, [out], SinkOptions(monte_carlo=200, seed=3))
    import json
    data = json.loads(json.dumps(design.to_dict()))
    assert data["parts"][0]["stderr"]["theta"] is None
    assert data["monte_carlo"]["outputs"][0]["error"]["std"] > 0


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

curves = st.one_of(
    st.builds(lambda v, g: DeviceParams("linear", v, gm=g), st.floats(1.0, 4.0), st.floats(0.05, 2.0)),
    st.builds(lambda v, k, t: DeviceParams("theta", v, kp=k, theta=t), st.floats(1.0, 4.0), st.floats(0.05, 2.0),
              st.floats(0.0, 1.0)),
    st.builds(lambda v, k, t, n: DeviceParams("ekv", v, kp=k, theta=t, n=n), st.floats(1.0, 4.0),
              st.floats(0.05, 2.0), st.floats(0.0, 1.0), st.floats(1.0, 2.5)),
)


@settings(max_examples=60, deadline=None)
@given(curves, st.lists(curves, max_size=3), st.floats(5.0, 48.0), st.floats(10.0, 10_000.0),
       st.sampled_from([0.0, 0.47, 10.0]))
def test_every_operating_point_satisfies_both_lines(ref_params, out_params, supply, resistor, rs):
    # Kirchhoff on the reference branch and on each output (exact solve, no rounding anywhere).
    point = solve_mirror(supply, resistor, ref_params, out_params, rs)
    assert (supply - point.vg) / resistor == pytest.approx(point.i_ref, rel=1e-9, abs=1e-15)
    assert float(ref_params.current(point.vgs_ref)) == pytest.approx(point.i_ref, rel=1e-9, abs=1e-15)
    for params, i_out, vgs in zip(out_params, point.i_out, point.vgs_out):
        assert vgs + i_out * rs == pytest.approx(point.vg, abs=1e-9)
        assert float(params.current(vgs)) == pytest.approx(i_out, rel=1e-8, abs=1e-15)


@settings(max_examples=40, deadline=None)
@given(curves, st.floats(1e-3, 0.5), st.floats(12.0, 48.0), st.sampled_from(["E24", "E96"]))
def test_synthesis_hits_the_target_with_the_exact_resistor(ref_params, target, supply, series):
    ref = Part("R", ref_params)
    try:
        design = synthesize_sink(supply, target, ref, [], SinkOptions(series=series))
    except DesignError:
        assert float(ref_params.vgs_at(target)) >= supply  # only when the supply truly cannot reach it
        return
    assert design.r_chosen == nearest_preferred(design.r_exact, series)
    assert analyze_sink(supply, design.r_exact, ref, []).i_ref == pytest.approx(target, rel=1e-8)


def test_triode_law_meets_saturation_at_the_edge():
    # SPICE level-1 linear region (ngspice mos1load.c): KP VDS (Vov - VDS/2) equals (KP/2) Vov^2 at VDS = Vov.
    from benchlab.design.mirror import output_in_circuit, triode_current

    params = DeviceParams("theta", 2.0, kp=0.8, theta=0.2)
    vgs = 2.6
    assert triode_current(params, vgs, 0.6) == pytest.approx(float(params.current(vgs)), rel=1e-12)
    assert triode_current(params, vgs, 0.3) < float(params.current(vgs))
    i_sat, _, region = output_in_circuit(params, vgs, 0.0, drain_v=5.0)
    assert region == "saturation" and i_sat == pytest.approx(float(params.current(vgs)))
    i_tri, _, region = output_in_circuit(params, vgs, 0.0, drain_v=0.3)
    assert region == "triode" and i_tri == pytest.approx(triode_current(params, vgs, 0.3))
    _, _, region = output_in_circuit(DeviceParams("linear", 2.0, gm=0.5), vgs, 0.0, drain_v=0.1)
    assert region == "triode-unmodelled"
