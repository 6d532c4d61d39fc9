"""Fit-targeted sweeps (``vth_stderr_v``): the search's load-line jump, the grid of currents, the stop rule,
the leak check, the safety limits, and one end-to-end sweep on the simulated bench."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from benchlab.errors import InputError
from benchlab.extract.fit import fit_sweep
from benchlab.models import DeviceParams
from benchlab.services.characterize import sweep_bag
from benchlab.services.fitting import running_vth_stderr
from benchlab.sweep.classify import LEAK_VGS_FRACTION
from benchlab.sweep.engine import run
from benchlab.sweep.fit_targeting import (
    first_level, fit_reached, grid_currents, interpolate_vgs, interpolation_base, leak_check_level, leak_scale_v,
    next_fit_step, next_target,
)
from benchlab.sweep.session import read_session
from benchlab.sweep.plan import Limits, SweepPlan, validate_plan
from benchlab.sweep.records import SweepPoint

from .fakes import FakeBench, applied_voltages
from .simhelp import sim_bench

LIMITS = Limits(max_supply_v=12.0, max_drain_a=0.5, max_power_w=2.0)


def plan(**kw) -> SweepPlan:
    base = dict(fixture="resistor", limits=LIMITS, series_resistor_ohm=46.5, max_current_a=0.05, vth_stderr_v=0.002)
    base.update(kw)
    return SweepPlan(**base)


def pt(vs: float, vgs: float, i_d: float, k: int = 0) -> SweepPoint:
    return SweepPoint(point=k, time_s=0.0, vgs=vgs, id=i_d, v_source=vs, i_source=i_d, status="ok", direction="up")


def test_search_jumps_along_the_load_line_and_never_past_the_top_current():
    # Ohm's law on the series resistor: a part whose VGS rises with its current cannot carry more than
    # (Vs - VGS_last) / R at the next supply voltage (common practice)
    p = plan()
    step = next_fit_step(p, [pt(1.0, 1.0, 0.0)], 1.0)
    assert step.level == pytest.approx(1.0 + 0.9 * 46.5 * 0.05)
    assert step.expect_id <= p.max_current_a
    assert (step.level - 1.0) / p.worst_case_resistor_ohm() <= p.max_current_a


def test_an_open_part_is_searched_up_to_max_search_v_not_beyond():
    p = plan(max_search_v=4.0)
    assert next_fit_step(p, [pt(3.0, 3.0, 0.0)], 3.0).level == pytest.approx(4.0)


def test_grid_is_filled_from_the_bottom_then_halved():
    p = plan()
    grid = grid_currents(p, 0)
    assert grid[0] == pytest.approx(1e-3) and grid[-1] == pytest.approx(0.05) and len(grid) == 6
    assert next_target(p, [0.029]) == pytest.approx(1e-3)  # the lowest grid current nothing is near yet
    assert next_target(p, list(grid)) == pytest.approx(grid_currents(p, 1)[1])  # all taken: the halved grid


def test_setpoints_between_points_are_interpolated_in_log_current():
    # two points a decade apart and 90 mV apart: half a decade up is 45 mV up
    assert interpolate_vgs([(2.0, 1e-4), (2.09, 1e-3)], math.sqrt(1e-7)) == pytest.approx(2.045)


def test_a_reading_in_the_leak_region_does_not_steer_the_first_grid_point():
    # the simulated bench (seed 1, part 2): the leak-check reading at 1.04 V read 7 nA (leakage and the meter's
    # noise), the load-line jump 7.46 mA at 2.784 V. Aiming through the 7 nA reading is a slope of 0.29 V per
    # decade, n = 4.9 in S = n UT ln10 where a MOSFET's sub-threshold n lies about 1-2 (Enz, Krummenacher, Vittoz
    # 1995; the range is common practice): the 1 mA target was set 0.16 V low and read 52 uA, a point the grid
    # took again. The slope guess (0.1 V per decade) aims it at 2.784 - 0.1 x log10(7.46 / 1.04) V.
    p = plan()
    ups = [pt(1.044, 1.045, 7e-9, 0), pt(3.133, 2.784, 7.46e-3, 1)]
    step = next_fit_step(p, ups, 3.133)
    assert step.expect_id == pytest.approx(1e-3)
    assert step.expect_vgs == pytest.approx(2.784 + 0.1 * math.log10(1e-3 / 7.46e-3), abs=1e-6)
    assert step.level == pytest.approx(step.expect_vgs + 1e-3 * p.series_resistor_ohm, abs=1e-6)


def test_a_sub_threshold_reading_above_the_leak_region_still_guides_the_aim():
    # seed 5, bag of 10, part 10: 69 nA at 3.146 V (above half the 3.769 V of the first conducting reading) is
    # channel current below the detection floor: it stays the base below the conducting points
    p = plan()
    ups = [pt(1.047, 1.050, -4.5e-9, 0), pt(3.144, 3.146, 6.9e-8, 1), pt(5.241, 3.769, 3.134e-2, 2)]
    seen = [(3.769, 3.134e-2)]
    assert interpolation_base(p, ups, seen) == [(3.146, 6.9e-8), (3.769, 3.134e-2)]


def _conducting(count: int) -> list[SweepPoint]:
    return [pt(3 + 0.2 * k, 2.6 + 0.05 * k, 1e-3 * 2 ** k, k) for k in range(count)]


@pytest.mark.parametrize("count, err, stops", [(5, 1e-3, False), (6, 1e-3, True), (6, 3e-3, False),
                                               (6, 0.0, False), (6, math.inf, False), (24, 3e-3, True)])
def test_stop_rule(count, err, stops):
    reason = fit_reached(plan(points=24), _conducting(count), lambda points: err)
    assert bool(reason) == stops
    if stops and count == 24:
        assert reason.startswith("point budget (24) spent")


def test_leak_check_asks_for_a_point_at_half_the_conduction_vgs():
    # the classifier's rule (docs/sweeps.md): leakage is judged at half the VGS of the 250 uA point or below
    points = [pt(2.0, 2.0, 0.0), pt(2.6, 2.5, 250e-6), pt(4.0, 2.9, 0.03)]
    assert leak_check_level(plan(), points) == pytest.approx(0.9 * 0.5 * 2.5, abs=0.02)
    assert leak_check_level(plan(), [pt(1.0, 1.0, 0.0)] + points) is None


def test_plan_refuses_vth_stderr_outside_the_adaptive_mode():
    with pytest.raises(InputError, match="vth_stderr_v"):
        validate_plan(plan(mode="voltages", voltages=(1.0, 2.0)))
    with pytest.raises(InputError, match="vth_stderr_v"):
        validate_plan(plan(vth_stderr_v=0.0))


def test_without_the_running_fit_nothing_is_sent():
    bench = FakeBench()
    with pytest.raises(InputError, match="running fit"):
        run(plan(), bench, clock=bench.clock, sleep=bench.clock.sleep)
    assert bench.log == []


@settings(max_examples=15, deadline=None)
@given(vth=st.floats(1.0, 4.5), kp=st.floats(0.2, 5.0), theta=st.floats(0.0, 0.5), n=st.floats(1.1, 2.0),
       r=st.sampled_from([1.0, 10.0, 100.0]), max_v=st.floats(5.0, 15.0), max_a=st.floats(0.05, 0.5),
       max_w=st.floats(0.2, 2.0), fixture=st.sampled_from(["resistor", "smu"]), need=st.integers(6, 12),
       prior=st.one_of(st.none(), st.floats(0.05, 8.0)))
def test_fit_targeted_sweeps_keep_the_limits_and_end_off(vth, kp, theta, n, r, max_v, max_a, max_w, fixture,
                                                         need, prior):
    # the stop rule is stubbed (it stops after `need` conducting points) so the stepping is exercised at length;
    # a bag's prior (any value, right or wrong for the part) moves the first reading and nothing past the limits
    bench = FakeBench(DeviceParams(model="ekv", vth=vth, kp=kp, theta=theta, n=n), resistor_ohm=r)
    p = plan(fixture=fixture, limits=Limits(max_v, max_a, max_w), series_resistor_ohm=r, max_current_a=max_a * 0.8,
             prior_leak_scale_v=prior)
    outcome = run(p, bench, clock=bench.clock, sleep=bench.clock.sleep,
                  vth_stderr=lambda points: 1e-3 if sum(q.id >= 2e-6 for q in points) >= need else math.inf)
    assert max(applied_voltages(bench.log)) <= max_v
    for q in outcome.points:
        assert q.id <= max_a * 1.0000001
    assert bench.output is False and applied_voltages(bench.log)[-1] == 0.0


def test_on_the_simulated_bench_it_stops_at_the_requested_error_with_fewer_points(tmp_path):
    with sim_bench(bag_size=1, seed=5) as (sim, handle):
        truth = sim.current_part.to_dict()
        p = plan(limits=Limits.from_safety_limits(handle.config.limits),
                 series_resistor_ohm=handle.config.series_resistor_ohm, down_sweep=False, settle_s=0.0)
        outcome = run(p, handle.bench, vth_stderr=lambda pts: running_vth_stderr(pts, sim.config.ambient_k))
        assert sim.log.last_output_state("supply") is False
    assert outcome.complete and outcome.classification == "good"
    assert outcome.stop_reason.startswith("Vth standard error")
    assert len(outcome.points) <= 10  # an even-in-volts sweep needed 12 on this part (benchmarks/README.md)
    ok = sorted((q.vgs, q.id) for q in outcome.points if q.status == "ok" and q.id > 2e-6)
    vgs, i_d = (np.array(c) for c in zip(*ok))
    fitted = fit_sweep(vgs, i_d, temperature_k=sim.config.ambient_k)
    # the simulated part's own threshold (its truth; the fitter shares its physics) within a few standard errors
    assert abs(fitted.params.vth - truth["vth_ref"]) < 0.005


def test_duds_are_still_judged_on_the_simulated_bench():
    # the simulator's bag of 6 (seed 3): good, open, good, leaky, good, short
    from .simhelp import EXPECTED_CLASS

    with sim_bench(bag_size=6, seed=3) as (sim, handle):
        p = plan(limits=Limits.from_safety_limits(handle.config.limits), points=10,  # a budget of 10: quick
                 series_resistor_ohm=handle.config.series_resistor_ohm, down_sweep=False, settle_s=0.0)
        for _ in range(6):
            kind = sim.current_part.to_dict()["kind"]
            outcome = run(p, handle.bench, vth_stderr=lambda pts: running_vth_stderr(pts, sim.config.ambient_k))
            assert outcome.classification == EXPECTED_CLASS[kind], (kind, outcome.reason)
            sim.core.next_part()


def test_the_bags_prior_only_ever_lowers_the_first_reading_into_the_leak_region():
    # Ohm's law on the series resistor: from 0 V a setpoint V can drive at most V / R (common practice); the
    # leak region is the classifier's rule (docs/sweeps.md): at or below half the VGS of the 250 uA point
    p = plan(max_current_a=0.1)
    half_jump = 0.5 * 0.9 * 46.5 * 0.1
    assert first_level(p) == pytest.approx(half_jump)
    assert first_level(replace(p, prior_leak_scale_v=2.6)) == pytest.approx(0.9 * 0.5 * 2.6)
    assert first_level(replace(p, prior_leak_scale_v=8.0)) == pytest.approx(half_jump)  # never raised
    assert first_level(replace(p, fixture="smu", prior_leak_scale_v=2.6)) == p.start_v
    ups = [pt(1.17, 1.17, 1e-9), pt(6.0, 2.9, 0.07), pt(2.9, 2.6, 250e-6)]
    assert leak_scale_v(p, ups) == pytest.approx(2.6)
    assert leak_check_level(p, ups) is None  # the first reading serves the leak check
    with pytest.raises(InputError, match="prior_leak_scale_v"):
        validate_plan(replace(p, prior_leak_scale_v=-1.0))


def test_a_bag_hands_the_leak_region_of_its_good_parts_to_the_next_part(tmp_path):
    # the simulator's bag of 6 (seed 3): good, open, good, leaky, good, short; top 100 mA, where half the load
    # line's jump (2.1 V) lies above the leak region of these parts
    from .simhelp import EXPECTED_CLASS

    with sim_bench(bag_size=6, seed=3) as (sim, handle):
        truth = {q.label: q.kind for q in sim.bag}
        p = plan(limits=Limits.from_safety_limits(handle.config.limits), points=10, max_current_a=0.1,
                 series_resistor_ohm=handle.config.series_resistor_ohm, down_sweep=False, settle_s=0.0)
        result = sweep_bag(handle, p, sessions_root=tmp_path, lot="prior", count=6)
        assert sim.log.last_output_state("supply") is False
    stored = read_session(result.session_path).sweeps
    prior = None
    for outcome in result.outcomes:
        assert outcome.classification == EXPECTED_CLASS[truth[outcome.label]], (outcome.label, outcome.reason)
        assert stored[outcome.label].meta["plan"]["prior_leak_scale_v"] == prior
        first = outcome.points[0]
        assert first.v_source == pytest.approx(first_level(replace(p, prior_leak_scale_v=prior)), abs=1e-3)
        if outcome.classification == "good":
            scale = leak_scale_v(p, outcome.points)
            in_leak_region = [q for q in outcome.points if 0 < q.vgs <= LEAK_VGS_FRACTION * scale]
            if prior is None:  # no prior: the first reading is above the leak region, one is added at the end
                assert first not in in_leak_region and in_leak_region == [outcome.points[-1]]
            else:  # the first reading serves the leak check: no reading is added for it
                assert in_leak_region == [first]
            prior = scale if prior is None else min(prior, scale)
    assert prior is not None and prior > 1.5  # the leaky part's low VGS never became the prior
