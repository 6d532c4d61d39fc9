"""Engine and safety guard against in-memory instruments: limits, exit paths, pacing, classification."""

from __future__ import annotations

import math
import threading

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from benchlab.errors import InputError, InstrumentTimeout, SafetyError, SweepCancelled
from benchlab.models import DeviceParams, thermal_voltage
from benchlab.sweep.engine import run
from benchlab.sweep.stepping import predict_vgs
from benchlab.sweep.plan import Limits, SweepPlan, validate_plan
from benchlab.sweep.records import PointMeasured, SweepDone, SweepFault
from benchlab.sweep.safety import GuardedSmu, GuardedSupply, line_worst_power

from .fakes import PART, FakeBench, applied_voltages

LIMITS = Limits(max_supply_v=12.0, max_drain_a=0.5, max_power_w=2.0)


def resistor_plan(**kw) -> SweepPlan:
    base = dict(fixture="resistor", limits=LIMITS, series_resistor_ohm=10.0, max_current_a=0.1)
    base.update(kw)
    return SweepPlan(**base)


def sweep(bench: FakeBench, plan: SweepPlan, **kw):
    return run(plan, bench, clock=bench.clock, sleep=bench.clock.sleep, **kw)


def assert_off(bench: FakeBench) -> None:
    """Output off and setpoint back at zero, in that order, as the last commands."""
    assert bench.output is False
    outputs = [e for e in bench.log if e[0] == "output"]
    assert outputs[-1] == ("output", False)
    last_off = max(k for k, e in enumerate(bench.log) if e == ("output", False))
    assert all(e[0] != "output" or e[1] is False for e in bench.log[last_off:])
    assert applied_voltages(bench.log)[-1] == 0.0


# ------------------------------------------------------------------------------------------ guard
def test_guard_refuses_output_on_before_current_limit():
    bench = FakeBench()
    guard = GuardedSupply(bench.supply, LIMITS, 10.0)
    with pytest.raises(SafetyError, match="current limit is not set"):
        guard.set_output(True)
    assert bench.log == []  # nothing reached the instrument
    smu = GuardedSmu(bench.smu, LIMITS)
    with pytest.raises(SafetyError, match="compliance is not set"):
        smu.set_output(True)
    assert bench.log == []


def test_guard_refuses_setpoints_beyond_limits_and_sends_nothing():
    bench = FakeBench()
    guard = GuardedSupply(bench.supply, LIMITS, 10.0)
    with pytest.raises(SafetyError):
        guard.set_current_limit(0.6)  # above max_drain_a
    guard.set_current_limit(0.2)
    sent = list(bench.log)
    for bad in (12.5, -1.0, math.nan, math.inf):
        with pytest.raises(SafetyError):
            guard.set_voltage(bad)
    with pytest.raises(SafetyError, match="predicted drain current"):
        guard.set_voltage(5.0, expect_id=0.6, expect_vgs=4.0)
    with pytest.raises(SafetyError, match="predicted power"):
        guard.set_voltage(8.0, expect_id=0.4, expect_vgs=6.0)  # 2.4 W > 2 W
    assert bench.log == sent
    guard.set_voltage(12.0, expect_id=0.1, expect_vgs=4.0)  # exactly at max_supply_v is allowed
    assert bench.log[-1] == ("volt", 12.0)


def test_guard_worst_case_without_prediction_is_the_resistor_line_maximum():
    # Maximum power transfer (textbook circuit theory): a part on a line Vs, R takes at most Vs^2 / 4R.
    assert line_worst_power(10.0, 10.0, 10.0) == pytest.approx(100.0 / 40.0)
    # ... unless the supply's current limit stops it first: (Vs - I R) I at I = limit
    assert line_worst_power(10.0, 10.0, 0.1) == pytest.approx((10.0 - 1.0) * 0.1)
    bench = FakeBench()
    guard = GuardedSupply(bench.supply, Limits(30.0, 0.5, 1.0), 10.0)
    guard.set_current_limit(0.5)
    with pytest.raises(SafetyError, match="could land in the part"):
        guard.set_voltage(7.0)  # up to 1.225 W
    guard.set_voltage(6.0)  # 0.9 W worst case


def test_guard_smu_compliance_and_levels():
    bench = FakeBench()
    smu = GuardedSmu(bench.smu, LIMITS)
    with pytest.raises(SafetyError):
        smu.configure_source("voltage", 0.8)  # compliance above max_drain_a
    with pytest.raises(SafetyError):
        smu.configure_source("current", 20.0)  # compliance above max_supply_v
    smu.configure_source("current", 10.0)
    with pytest.raises(SafetyError, match="above max_drain_a"):
        smu.set_level(0.6)
    with pytest.raises(SafetyError, match="worst-case power"):
        smu.set_level(0.3)  # 0.3 A x 10 V compliance = 3 W
    smu.set_level(0.3, expect_other=4.0)  # predicted 1.2 W
    smu.set_output(True)
    with pytest.raises(SafetyError, match="while the output is on"):
        smu.configure_source("voltage", 0.1)
    with pytest.raises(SafetyError):
        smu.run_list([0.1, 0.7], 0.01)
    assert not bench.smu.lists  # the bad list never reached the instrument


def test_guard_smu_prepare_refuses_as_configure_source_does_before_anything_is_sent():
    # safety invariant (docs/sweeps.md): no compliance beyond the configured limits, none changed while powered
    bench = FakeBench()
    smu = GuardedSmu(bench.smu, LIMITS)
    with pytest.raises(SafetyError):
        smu.prepare("voltage", 0.8, 1.0)  # compliance above max_drain_a
    with pytest.raises(SafetyError):
        smu.prepare("current", 20.0)  # compliance above max_supply_v
    assert bench.log == []  # nothing reached the instrument
    smu.prepare("voltage", 0.1, 0.5)  # an instrument without prepare_source: the three settings in order
    assert bench.log == [("configure", "voltage", 0.1), ("nplc", 0.5), ("level", 0.0)]
    assert (smu.mode, smu.compliance, smu.level) == ("voltage", 0.1, 0.0)
    smu.set_output(True)
    with pytest.raises(SafetyError, match="while the output is on"):
        smu.prepare("voltage", 0.1)


# ------------------------------------------------------------------------------------------ order
def test_sweep_sets_limit_first_and_switches_off_at_the_end():
    bench = FakeBench()
    outcome = sweep(bench, resistor_plan())
    first_on = bench.log.index(("output", True))
    limits = [k for k, e in enumerate(bench.log) if e[0] == "limit"]
    assert limits and limits[0] < first_on
    assert all(v == 0.0 for v in applied_voltages(bench.log[:first_on]))  # zero volts when switched on
    assert outcome.complete and outcome.classification == "good"
    assert_off(bench)


@pytest.mark.parametrize("fixture,mode", [("resistor", "targets"), ("smu", "targets"), ("smu", "currents")])
def test_every_point_is_recorded_before_the_next_setpoint(fixture, mode):
    bench = FakeBench()
    seen = []

    class Recorder:
        def append(self, point):
            seen.append((point.point, len(applied_voltages(bench.log))))

        def finish(self, outcome):
            seen.append(("finish", outcome.complete))

    plan = SweepPlan(fixture=fixture, limits=LIMITS, mode=mode, series_resistor_ohm=10.0, max_current_a=0.1)
    sweep(bench, plan, recorder=Recorder())
    counts = [c for _, c in seen[:-1]]
    # setpoints applied when each point was stored: exactly one new setpoint per point, none ahead
    assert counts == list(range(counts[0], counts[0] + len(counts)))
    assert seen[-1] == ("finish", True)


# ------------------------------------------------------------------------------------------ exits
class Boom(Exception):
    pass


@pytest.mark.parametrize("exc", [Boom("instrument exploded"), InstrumentTimeout("no reply"), KeyboardInterrupt(),
                                 SweepCancelled("stopped by SIGTERM")])
@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_output_off_on_every_exception(exc, fixture):
    bench = FakeBench()
    bench.fail_on = "read" if fixture == "resistor" else "measure"
    bench.fail_after = 30
    bench.fail_exc = exc
    events, finished = [], []

    class Recorder:
        def append(self, point):
            pass

        def finish(self, outcome):
            finished.append(outcome)

    plan = SweepPlan(fixture=fixture, limits=LIMITS, series_resistor_ohm=10.0, max_current_a=0.1)
    with pytest.raises(type(exc)):
        sweep(bench, plan, on_event=events.append, recorder=Recorder())
    assert_off(bench)
    assert finished and finished[0].complete is False and len(finished[0].points) > 5
    assert isinstance(events[-1], SweepFault)


def test_output_off_when_the_instrument_fails_during_setup():
    bench = FakeBench()
    bench.fail_on = "set_current_limit"
    with pytest.raises(RuntimeError):
        sweep(bench, resistor_plan())
    assert bench.output is False and ("output", True) not in bench.log


def test_output_off_even_when_switching_off_fails_once():
    bench = FakeBench()
    bench.fail_on, bench.fail_after, bench.fail_exc = "read", 10, Boom("lost")
    calls = {"n": 0}
    original = bench.supply.set_output

    def flaky_set_output(on):
        if not on and calls["n"] == 0:
            calls["n"] += 1
            raise Boom("first off failed")
        original(on)

    bench.supply.set_output = flaky_set_output
    with pytest.raises(Boom):
        sweep(bench, resistor_plan())
    # the off failed, but the setpoint still went to zero; the problem is reported, not hidden
    assert applied_voltages(bench.log)[-1] == 0.0


def test_cancel_stops_between_points_and_marks_incomplete():
    bench = FakeBench()
    cancel = threading.Event()

    def on_event(event):
        if isinstance(event, PointMeasured) and event.count == 12:
            cancel.set()

    outcome = sweep(bench, resistor_plan(), on_event=on_event, cancel=cancel)
    assert outcome.complete is False and outcome.stop_reason == "cancelled"
    assert len(outcome.points) == 12
    assert_off(bench)


def test_bad_plan_refused_before_anything_is_sent():
    bench = FakeBench()
    bad_plans = [resistor_plan(max_current_a=0.9), resistor_plan(points=1), resistor_plan(series_resistor_ohm=0.0),
                 resistor_plan(mode="voltages", voltages=(1.0, 13.0)), resistor_plan(pulsed_duty=1.5),
                 resistor_plan(mode="currents"), resistor_plan(fixture="bridge"), resistor_plan(start_v=20.0),
                 resistor_plan(limits=Limits(12.0, -0.5, 2.0))]
    for plan in bad_plans:
        with pytest.raises((InputError, SafetyError)):
            sweep(bench, plan)
    assert bench.log == []


# ------------------------------------------------------------------------------------------ limits
@settings(max_examples=25, deadline=None)
@given(vth=st.floats(1.0, 4.5), kp=st.floats(0.2, 5.0), theta=st.floats(0.0, 0.5), n=st.floats(1.1, 2.0),
       r=st.sampled_from([1.0, 10.0, 100.0]), max_v=st.floats(5.0, 15.0), max_a=st.floats(0.05, 0.5),
       max_w=st.floats(0.2, 2.0), fixture=st.sampled_from(["resistor", "smu"]))
def test_no_setpoint_or_reading_beyond_the_limits(vth, kp, theta, n, r, max_v, max_a, max_w, fixture):
    part = DeviceParams(model="ekv", vth=vth, kp=kp, theta=theta, n=n)
    bench = FakeBench(part, resistor_ohm=r)
    limits = Limits(max_v, max_a, max_w)
    plan = SweepPlan(fixture=fixture, limits=limits, series_resistor_ohm=r, max_current_a=max_a * 0.8,
                     down_sweep=True)
    outcome = sweep(bench, plan)
    assert max(applied_voltages(bench.log)) <= max_v
    assert all(e[1] <= max_a for e in bench.log if e[0] in ("limit",))
    for p in outcome.points:
        assert p.id <= max_a * 1.0000001
        # the engine stops once a reading reaches the power limit; adaptive steps are small enough
        # that the first reading past it overshoots by little
        assert p.id * p.vgs <= max_w * 1.5
    assert_off(bench)


def test_predicted_vgs_extrapolates_in_log_current():
    # two points a decade apart 90 mV apart: the next decade is predicted 90 mV higher
    assert predict_vgs([(2.0, 1e-5), (2.09, 1e-4)], 1e-3) == pytest.approx(2.18)
    assert predict_vgs([(2.0, 1e-5)], 1e-4) == pytest.approx(2.1)


# ------------------------------------------------------------------------------------------ spacing
def test_adaptive_points_are_spread_evenly_in_log_current():
    bench = FakeBench()
    plan = resistor_plan(points=20, min_current_a=1e-5, max_current_a=0.1)
    outcome = sweep(bench, plan)
    on = [p for p in outcome.points if p.id >= 1e-5]
    ratios = np.diff(np.log10([p.id for p in on]))
    planned = 4.0 / 19  # decades per step
    assert len(on) <= 2 * plan.points
    assert np.all(ratios > 0)
    assert np.median(ratios) == pytest.approx(planned, rel=0.35)
    # and it did NOT crowd them near threshold: a fifth of the points sit in the top decade
    assert sum(p.id >= 0.01 for p in on) >= plan.points // 5


def test_vgs_at_250ua_and_subthreshold_swing_match_published_definitions():
    bench = FakeBench()
    outcome = sweep(bench, resistor_plan(min_current_a=1e-6, detect_current_a=1e-7, points=30))
    # VGS(th) as datasheets state it: VGS at ID = 250 uA with VDS = VGS (common practice)
    assert outcome.vgs_at_ref == pytest.approx(float(PART.vgs_at(250e-6)), abs=2e-3)
    # Sub-threshold swing S = n UT ln10 (Enz, Krummenacher, Vittoz 1995): the low-current points show it
    low = [p for p in outcome.points if 1e-7 < p.id < 1e-5]
    slope = np.polyfit(np.log10([p.id for p in low]), [p.vgs for p in low], 1)[0]
    assert slope == pytest.approx(PART.n * thermal_voltage() * math.log(10), rel=0.05)


def test_current_forcing_sweep_hits_log_spaced_currents():
    bench = FakeBench()
    plan = SweepPlan(fixture="smu", limits=LIMITS, mode="currents", points=9, min_current_a=1e-5, max_current_a=0.1)
    outcome = sweep(bench, plan)
    # log-spaced, with the target nearest 250 uA moved onto it: datasheets define VGS(th) as VGS at a fixed
    # small drain current such as 250 uA with VDS = VGS (common practice), so that current is forced exactly
    expected = np.geomspace(1e-5, 0.1, 9)
    expected[3] = 250e-6
    assert [p.id for p in outcome.points] == pytest.approx(list(expected))
    at_ref = outcome.points[3]
    assert outcome.vgs_at_ref == pytest.approx(at_ref.vgs, abs=1e-9)
    assert outcome.vgs_at_ref == pytest.approx(float(PART.vgs_at(250e-6)), abs=2e-3)


def test_voltage_list_sweeps_on_smu_in_chunks():
    bench = FakeBench()
    volts = tuple(np.round(np.linspace(0, 3.6, 19), 3))
    plan = SweepPlan(fixture="smu", limits=LIMITS, mode="voltages", voltages=volts, use_list=True, list_chunk=8,
                     max_current_a=0.1)
    outcome = sweep(bench, plan)
    assert [len(chunk) for chunk in bench.smu.lists] == [8, 8, 3]
    assert [p.vgs for p in outcome.points] == pytest.approx(list(volts))
    assert_off(bench)


def test_down_sweep_replays_the_setpoints_in_reverse():
    bench = FakeBench()
    outcome = sweep(bench, resistor_plan(down_sweep=True))
    ups = [p for p in outcome.points if p.direction == "up" and p.id >= 2e-6]
    downs = [p for p in outcome.points if p.direction == "down"]
    assert [p.v_source for p in downs] == pytest.approx([p.v_source for p in ups[:-1]][::-1])
    assert isinstance(outcome, object) and outcome.complete


def test_pulsed_sweep_keeps_the_duty_cycle():
    bench = FakeBench()
    plan = resistor_plan(pulsed_duty=0.1, settle_s=0.01)
    outcome = sweep(bench, plan)
    switch_ons = sum(1 for e in bench.log if e == ("output", True))
    assert switch_ons == len(outcome.points)  # on once per point
    # the fake clock only advances in sleeps: on-time is the settle, off-time the cool-down
    assert outcome.powered_s == pytest.approx(0.01 * len(outcome.points))
    assert outcome.powered_s / outcome.elapsed_s == pytest.approx(0.1, rel=1e-6)
    assert_off(bench)


# ------------------------------------------------------------------------------------------ classes
def _classify(bench: FakeBench, **kw):
    outcome = sweep(bench, resistor_plan(**kw))
    assert_off(bench)
    return outcome


def test_classifies_good_open_shorted_leaky_unstable():
    assert _classify(FakeBench()).classification == "good"
    out = _classify(FakeBench(part=None))
    assert out.classification == "open" and "no current" in out.reason
    short = _classify(FakeBench(part=None, leak_ohm=0.05))
    assert short.classification == "shorted" and "short" in short.reason
    leaky = _classify(FakeBench(leak_ohm=5e3))
    assert leaky.classification == "leaky" and "leakage path" in leaky.reason
    unstable = _classify(FakeBench(noise_v=0.02))
    assert unstable.classification == "unstable" and "did not settle" in unstable.reason


def test_part_failing_open_or_short_mid_sweep_stops_the_sweep():
    def fail(kind):
        bench = FakeBench()

        def on_read(b):
            if b.part is not None and b.operating_point()[1] > 1e-3:  # fails once it carries 1 mA
                if kind == "open":
                    b.part = None
                else:
                    b.part, b.leak_ohm = None, 0.05
        bench.on_read = on_read
        return _classify(bench)

    opened = fail("open")
    assert opened.classification == "open" and "failed open during the sweep" in opened.reason
    shorted = fail("short")
    assert shorted.classification == "shorted" and "failed short during the sweep" in shorted.reason


def test_events_report_points_and_done():
    bench = FakeBench()
    events = []
    outcome = sweep(bench, resistor_plan(), on_event=events.append, label="Q07")
    points = [e for e in events if isinstance(e, PointMeasured)]
    assert [e.count for e in points] == list(range(1, len(outcome.points) + 1))
    assert isinstance(events[-1], SweepDone) and events[-1].label == "Q07"
    assert "Q07: good" in events[-1].summary
    assert events[-1].to_dict()["event"] == "done"


def test_time_limit_stops_the_sweep_incomplete_with_output_off():
    bench = FakeBench()
    outcome = sweep(bench, resistor_plan(max_duration_s=0.5, settle_s=0.05))
    assert outcome.complete is False and outcome.stop_reason.startswith("timeout")
    assert 0.5 <= outcome.elapsed_s <= 0.5 + 0.05 + 1e-9  # checked before every point
    assert_off(bench)


@settings(max_examples=40, deadline=None)
@given(level=st.floats(0.0, 15.0), vgs=st.floats(0.0, 15.0), i_d=st.floats(0.0, 0.4), r=st.floats(1.0, 200.0))
def test_next_adaptive_step_never_leaves_the_limits(level, vgs, i_d, r):
    from benchlab.sweep.records import SweepPoint
    from benchlab.sweep.stepping import StopStepping, next_adaptive_step

    plan = resistor_plan(series_resistor_ohm=r)
    ups = [SweepPoint(0, 0.0, max(vgs - 0.1, 0.0), i_d / 3, level, 0.0), SweepPoint(1, 0.1, vgs, i_d, level, 0.0)]
    try:
        step = next_adaptive_step(plan, ups, level)
    except StopStepping:
        return
    if step is not None:
        assert 0.0 <= step.level <= LIMITS.max_supply_v
        assert step.level <= level + plan.max_step_v + 1e-6  # bounded step
        if step.expect_id is not None:
            assert step.expect_id <= LIMITS.max_drain_a


def test_voltage_list_beyond_the_worst_case_power_is_refused_up_front():
    # 12 V through 10 ohm, current limit 0.5 A (below the 0.6 A of maximum power transfer):
    # (12 V - 0.5 A x 10 ohm) x 0.5 A = 3.5 W could land in a part, above the 2 W limit
    bench = FakeBench()
    with pytest.raises(SafetyError, match="could put up to 3.5 W"):
        sweep(bench, resistor_plan(mode="voltages", voltages=(1.0, 12.0), max_current_a=0.4))
    assert bench.log == []


def test_the_resistor_tolerance_tightens_the_worst_case():
    # Maximum power transfer: a source V behind R puts at most V^2 / 4R into any load (textbook circuit
    # theory; e.g. Horowitz & Hill, The Art of Electronics, 3rd ed., ch. 1, from memory).
    # 8.5 V through the measured 10 ohm: 8.5^2 / 40 = 1.81 W, within the 2 W limit. But if the resistor is
    # 20 % low (8 ohm) the peak current 0.53 A is cut at the 0.5 A limit: (8.5 - 0.5 x 8) x 0.5 = 2.25 W.
    assert 8.5 ** 2 / 40 == pytest.approx(line_worst_power(8.5, 10.0, 0.5))
    nominal = resistor_plan(mode="voltages", voltages=(1.0, 8.5), max_current_a=0.4)
    validate_plan(nominal)
    loose = resistor_plan(mode="voltages", voltages=(1.0, 8.5), max_current_a=0.4, series_resistor_tolerance=0.2)
    bench = FakeBench()
    with pytest.raises(SafetyError, match="8.5 V through 8 ohm .* up to 2.25 W"):
        sweep(bench, loose)
    assert bench.log == []
    # the guard itself uses the low end too
    guard = GuardedSupply(FakeBench().supply, LIMITS, loose.worst_case_resistor_ohm())
    guard.set_current_limit(0.5)
    with pytest.raises(SafetyError, match="2.25 W"):
        guard.check_voltage(8.5)
    with pytest.raises(InputError, match="tolerance"):
        validate_plan(resistor_plan(series_resistor_tolerance=0.7))


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_limits_that_stop_the_search_before_conduction_leave_the_part_unjudged(fixture):
    # 1 uW cannot reach any threshold: the first search step is refused. That is not an open part.
    limits = Limits(max_supply_v=12.0, max_drain_a=0.5, max_power_w=1e-6)
    plan = resistor_plan(limits=limits) if fixture == "resistor" else SweepPlan(fixture="smu", limits=limits)
    bench = FakeBench()
    outcome = sweep(bench, plan)
    assert not outcome.complete and "refused by the safety limits" in outcome.reason
    assert all(p.id < 1e-6 for p in outcome.points)
    assert_off(bench)


def test_readings_over_range_are_recorded_and_three_in_a_row_stop_the_sweep():
    bench = FakeBench()
    bench.over_range_from = 40
    outcome = sweep(bench, resistor_plan())
    assert [p.status for p in outcome.points[-3:]] == ["over_range"] * 3
    assert outcome.stop_reason == "three readings in a row over range"
    assert all(p.status != "over_range" for p in outcome.points[:-3])
    assert_off(bench)


def test_a_search_step_that_overshoots_is_kept_as_a_probe_and_retried_finer():
    # a level-1-like turn-on (no sub-threshold current) on a 47 ohm line: a 0.1 V step jumps to milliamps
    steep = DeviceParams(model="square", vth=2.55, kp=1.0)
    bench = FakeBench(steep, resistor_ohm=47.0)
    outcome = sweep(bench, resistor_plan(series_resistor_ohm=47.0))
    probes = [p for p in outcome.points if p.status == "probe"]
    curve = [p for p in outcome.points if p.status == "ok"]
    assert probes and probes[0].id > 4 * 10e-6
    assert all(b.v_source > a.v_source for a, b in zip(curve, curve[1:]))  # the curve itself stays monotone
    first = min(p.id for p in curve if p.id >= 2e-6)
    assert first < probes[0].id / 4  # the retry found the turn-on below the overshooting reading
    assert outcome.vgs_at_ref == pytest.approx(2.55 + math.sqrt(2 * 250e-6 / 1.0), abs=1e-3)  # square law
