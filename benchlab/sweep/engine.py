"""The sweep engine: ``run(plan, instruments, on_event, cancel) -> SweepOutcome``.

Every setpoint goes through the safety guard (:mod:`benchlab.sweep.safety`); every measured point
is handed to the recorder (which makes it durable) before the next setpoint is applied; and the
output is switched off and the setpoint returned to zero on every way out of :func:`run` - done,
limit reached, cancel, an instrument error or timeout, ``KeyboardInterrupt`` and the exception the
CLI raises on SIGTERM. Interrupted sweeps are recorded with ``complete: false`` and the exception
is re-raised; a ``cancel`` request returns normally with ``complete=False``.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace
from typing import Any, Callable

from benchlab.errors import InputError, InstrumentError, SafetyError
from benchlab.sweep.classify import classify
from benchlab.sweep.plan import REFERENCE_CURRENT_A, SweepPlan, validate_plan
from benchlab.sweep.records import PointMeasured, SweepDone, SweepFault, SweepOutcome, SweepPoint, vgs_at_current
from benchlab.sweep.fit_targeting import first_level, fit_reached, in_setpoint_order, leak_check_level, next_fit_step
from benchlab.sweep.safety import GuardedSmu, GuardedSupply
from benchlab.sweep.stepping import StopStepping as _Stop
from benchlab.sweep.stepping import REFINE_FACTOR, check_reading, next_adaptive_step, overshoots, predict_vgs
from benchlab.kinds import Fixture, PartClass, PointStatus, SourceFunction, SweepMode

ABS_SETTLE_V = 1e-3  # repeated readings closer than this count as settled whatever the relative tolerance
# A first reading within this of the VGS the stepper predicted is taken as settled (no repeat); see
# read_point. Chosen from the prediction errors of good parts on the simulated bench (docs/sweeps.md).
PREDICTION_BAND_V = 0.01
# A drain current this many times the predicted one has VGS read again (see read_point).
SURPRISE_FACTOR = 10.0
SUBTHRESHOLD_NUT_V = 0.04  # n UT, about 40 mV (Enz, Krummenacher, Vittoz 1995)


class _NullRecorder:
    def append(self, point: SweepPoint) -> None:
        pass

    def finish(self, outcome: SweepOutcome) -> None:
        pass


class _Sweep:
    """State of one running sweep (one part)."""

    def __init__(self, plan: SweepPlan, instruments: Any, on_event, cancel, label: str, recorder,
                 clock: Callable[[], float], sleep: Callable[[float], None], vth_stderr=None):
        self.plan = plan
        self.vth_stderr = vth_stderr
        self.label = label
        self.on_event = on_event or (lambda event: None)
        self.cancel = cancel
        self.recorder = recorder or _NullRecorder()
        self.clock = clock
        self.sleep = sleep
        self.points: list[SweepPoint] = []
        self.t0 = clock()
        self.pulsed = plan.pulsed_duty is not None and plan.pulsed_duty < 1.0
        if plan.fixture == Fixture.RESISTOR:
            supply = getattr(instruments, "supply", None)
            self.meter = getattr(instruments, "meter", None)
            if supply is None or self.meter is None:
                raise InputError("the resistor fixture needs a supply and a meter on the bench")
            self.source = GuardedSupply(supply, plan.limits, plan.worst_case_resistor_ohm(), clock)
        else:
            smu = getattr(instruments, "smu", None)
            if smu is None:
                raise InputError("the smu fixture needs a source-measure unit on the bench")
            self.source = GuardedSmu(smu, plan.limits, clock)
            self.meter = None

    # ------------------------------------------------------------------ setup and the single point
    def setup(self) -> None:
        """Output off, limit / compliance first, setpoint 0, meter configured. Nothing is powered."""
        plan = self.plan
        if plan.fixture == Fixture.RESISTOR:
            self.source.safe_off()
            self.source.set_current_limit(plan.current_limit())
            self.source.set_voltage(0.0)
            self.meter_function = ""
            self.set_meter_function("voltage")
            if plan.mode == SweepMode.VOLTAGES:  # refuse a bad list before anything is switched on
                for v in plan.voltages:
                    self.source.check_voltage(v)
        else:
            self.source.safe_off()
            # compliance first, then mode, integration time and level 0: one batch, one error check where the
            # profile allows it (pipeline_error_check); the list and the point path start alike
            if plan.mode == SweepMode.CURRENTS:
                self.source.prepare("current", plan.limits.max_supply_v, plan.nplc)
            else:
                self.source.prepare("voltage", plan.current_limit(), plan.nplc)
            if plan.mode == SweepMode.VOLTAGES:
                for v in plan.voltages:
                    self.source.check_level(v)

    def set_meter_function(self, function: str) -> None:
        if function != self.meter_function:
            if function == "voltage":
                self.meter.configure_voltage(None, self.plan.nplc)
            else:
                self.meter.configure_current(None, self.plan.nplc)
            self.meter_function = function

    def apply(self, level: float, expect_id: float | None, expect_vgs: float | None) -> None:
        if self.plan.fixture == Fixture.RESISTOR:
            self.source.set_voltage(level, expect_id, expect_vgs)
        elif self.source.mode == SourceFunction.VOLTAGE:
            self.source.set_level(level, expect_id)
        else:
            self.source.set_level(level, expect_vgs)

    def _vgs_reading(self) -> float:
        """Resistor fixture: one VGS reading. When the drain current comes from the resistor drop, the
        supply's voltage readback is taken while the meter integrates (meter profiles with ``initiate`` and
        ``fetch``) and kept in ``self.v_readback`` beside the VGS it goes with."""
        self.set_meter_function("voltage")
        with_supply = self.plan.current_from != "meter"
        if getattr(self.meter, "can_trigger", False):
            self.meter.trigger()
            if with_supply:
                self.v_readback = float(self.source.measure_voltage())
            else:
                self.source.confirm()  # a deferred setpoint check, while the meter integrates
            return float(self.meter.fetch())
        vgs = float(self.meter.read())
        if with_supply:
            self.v_readback = float(self.source.measure_voltage())
        return vgs

    def _resistor_rest(self, vgs: float) -> tuple[float, float, float, bool]:
        """Resistor fixture, once VGS has settled: (id, v_source, i_source, at the current limit).

        The supply's current is the drain current (the meter across the part draws none): it is the meter's
        current reading, or the resistor drop, never a separate readback that would cost one more conversion.
        """
        if self.plan.current_from == "meter":
            self.set_meter_function("current")
            i_d = float(self.meter.read())
            v_src = self.source.setpoint_v  # the drain current is measured: no need to read the supply volts
        else:
            v_src = self.v_readback
            i_d = (v_src - vgs) / self.plan.series_resistor_ohm
        i_src = i_d
        # in constant-current mode the supply sits at its limit: the part no longer sets the current
        at_limit = self.source.current_limit_a is not None and i_src >= 0.98 * self.source.current_limit_a
        return i_d, v_src, i_src, at_limit

    def _primary(self) -> tuple[float, float]:
        """The reading whose repeat decides settling: (VGS, 0) on the resistor fixture, the SMU's (V, I)."""
        if self.plan.fixture == Fixture.RESISTOR:
            return self._vgs_reading(), 0.0
        v, i = self.source.measure()
        return float(v), float(i)

    def _settled(self, first: tuple[float, float], second: tuple[float, float]) -> bool:
        (v1, i1), (v2, i2) = first, second
        v_ok = abs(v2 - v1) <= max(self.plan.settle_tolerance * abs(v2), ABS_SETTLE_V)
        if self.plan.fixture == Fixture.RESISTOR or self.source.mode == SourceFunction.CURRENT:
            return v_ok
        # forcing volts, the current is what moves: allow the current change that the VGS tolerance implies
        # in sub-threshold (dI/I = dV / (n UT), n UT about 40 mV; Enz, Krummenacher, Vittoz 1995)
        rel = max(self.plan.settle_tolerance * abs(v2), ABS_SETTLE_V) / 0.04
        return abs(i2 - i1) <= rel * max(abs(i1), abs(i2)) + 1e-9

    def _as_predicted(self, reading: tuple[float, float], expect: tuple[float | None, float | None]) -> bool:
        """True when a first reading lands on the curve the points so far predict (then it needs no repeat).

        An unsettled part lands off the predicted curve as often as not and is read again; one that lands
        on it by chance is taken, which the repeated readings of the other points still catch.
        """
        expect_vgs, expect_id = expect
        v, i = reading
        if self.plan.fixture == Fixture.SMU and self.source.mode == SourceFunction.VOLTAGE:
            if expect_id is None or expect_id <= 0 or i <= 0:
                return False
            return abs(math.log(i / expect_id)) <= PREDICTION_BAND_V / SUBTHRESHOLD_NUT_V
        return expect_vgs is not None and abs(v - expect_vgs) <= PREDICTION_BAND_V

    def read_point(self, direction: str, expect: tuple[float | None, float | None] = (None, None)) -> SweepPoint:
        """Read (and re-read until settled) at the present setpoint; the point is not yet stored.

        ``expect`` is (VGS, ID) the stepper predicted for this setpoint: a first reading that agrees with it
        is taken as settled without a repeat (``plan.settle_by_prediction``).
        """
        reading = self._primary()
        status, spread = PointStatus.OK, 0.0
        finite = all(math.isfinite(x) and abs(x) < 1e30 for x in reading)
        if not finite:
            status = PointStatus.OVER_RANGE
        elif self.plan.repeat_reading and not (self.plan.settle_by_prediction
                                               and self._as_predicted(reading, expect)):
            for _ in range(self.plan.max_rereads + 1):
                again = self._primary()
                if not all(math.isfinite(x) and abs(x) < 1e30 for x in again):
                    break
                spread = again[0] - reading[0]
                settled = self._settled(reading, again)
                reading = again
                if settled:
                    break
            else:
                status = PointStatus.UNSETTLED
        if self.plan.fixture == Fixture.RESISTOR:
            vgs = reading[0]
            i_d, v_src, i_src, at_limit = self._resistor_rest(vgs)
            surprise = expect[1] is not None and expect[1] > 0 and i_d > SURPRISE_FACTOR * expect[1]
            if (at_limit or surprise) and math.isfinite(vgs):
                # the supply went constant-current after VGS was read, or the current is far above what the
                # points so far predict (a part failing short between the two readings does either): read
                # VGS again so the point describes one state of the part
                vgs = self._primary()[0]
            if status == PointStatus.OK and not (math.isfinite(i_d) and abs(i_d) < 1e30):
                status = PointStatus.OVER_RANGE
        else:
            (vgs, i_d), (v_src, i_src) = reading, reading
            at_limit = bool(self.source.in_compliance())
        if status == PointStatus.OK and at_limit:
            status = PointStatus.COMPLIANCE
        self.source.confirm()  # no point is kept before its setpoint is known to be accepted
        return SweepPoint(point=len(self.points), time_s=self.clock() - self.t0, vgs=vgs, id=i_d, v_source=v_src,
                          i_source=i_src, status=status, direction=direction, spread_v=spread)

    def measure(self, level: float, direction: str, expect_id: float | None = None,
                expect_vgs: float | None = None, judge=None) -> SweepPoint:
        """Apply one setpoint, wait, read, store the point durably, report it. ``judge(point)`` True
        records the reading as a ``probe`` (kept on disk, not part of the curve)."""
        self.check_interrupt()
        applied_at = self.clock()
        self.apply(level, expect_id, expect_vgs)
        if self.pulsed:
            on_at = applied_at = self.clock()
            self.source.set_output(True)
        if self.plan.settle_s:
            # the part starts settling when the setpoint is sent, not when its error check returns
            self.sleep(max(0.0, self.plan.settle_s - (self.clock() - applied_at)))
        point = self.read_point(direction, (expect_vgs, expect_id))
        if self.pulsed:
            self.source.set_output(False)
            on_time = self.clock() - on_at
            # cool-down so that on / (on + off) equals the duty cycle
            self.sleep(on_time * (1.0 / self.plan.pulsed_duty - 1.0))
        if judge is not None and judge(point):
            point = replace(point, status=PointStatus.PROBE)
        self.store(point)
        return point

    def check_interrupt(self) -> None:
        """Between points: a cancel request or the plan's time limit stops the sweep (record incomplete)."""
        if self.cancel is not None and self.cancel.is_set():
            raise _Stop("cancelled", interrupted=True)
        limit = self.plan.max_duration_s
        if limit is not None and self.clock() - self.t0 > limit:
            raise _Stop(f"timeout: the sweep ran longer than max_duration_s ({limit:g} s)", interrupted=True)

    def store(self, point: SweepPoint) -> None:
        # in the outcome first: an interrupt inside append must not lose a point that reached the disk
        self.points.append(point)
        self.recorder.append(point)  # durable before the next setpoint
        self.on_event(PointMeasured(self.label, point, len(self.points), self.plan.points, self.clock() - self.t0,
                                    self.progress(point)))

    def progress(self, point: SweepPoint) -> float:
        """How far along the sweep is, 0-1 (for progress bars)."""
        plan = self.plan
        if point.direction == "down":
            return 1.0
        if plan.mode == SweepMode.VOLTAGES:
            return min(1.0, len(self.points) / len(plan.voltages))
        if not (point.usable and point.id > plan.min_current_a):
            return 0.0
        return min(1.0, math.log(point.id / plan.min_current_a) / math.log(plan.max_current_a / plan.min_current_a))

    # ------------------------------------------------------------------ checks after each reading
    def check_reading(self, point: SweepPoint, previous: list[SweepPoint]) -> None:
        check_reading(self.plan, point, previous)

    # ------------------------------------------------------------------ the sweep modes
    def sweep_targets(self) -> str:
        """Adaptive: aim at log-spaced currents, predicting each next setpoint from the points so far (or, with
        ``plan.vth_stderr_v``, at the fit: :mod:`benchlab.sweep.fit_targeting`). Returns why it ended."""
        plan = self.plan
        level = plan.start_v
        search_step, refinements = plan.search_step_v, 0
        aim_at_fit = plan.vth_stderr_v is not None
        if aim_at_fit:
            try:  # the load line's first jump, when the limits allow it; else start_v as usual
                level = first_level(plan)
                self.source.check_voltage(level) if plan.fixture == Fixture.RESISTOR else self.source.check_level(level)
            except SafetyError:
                level = plan.start_v
        self.source_on_if_continuous()
        ups = [self.measure(level, "up")]
        while True:
            if aim_at_fit:
                reached = fit_reached(plan, ups, self.vth_stderr)
                if reached:
                    self.check_leakage(ups)
                    return reached
                step = next_fit_step(plan, ups, level)
            else:
                step = next_adaptive_step(plan, ups, level, search_step)
            if step is None:
                return "reached the top target current"
            try:
                if plan.fixture == Fixture.RESISTOR:
                    self.source.check_voltage(step.level, step.expect_id, step.expect_vgs)
                else:
                    if step.expect_id is None:
                        self.fit_compliance_to_power(step.level)
                    self.source.check_level(step.level, step.expect_id)
            except SafetyError as exc:
                # before the part has conducted this says nothing about the part (it is not "open"): the
                # record stays incomplete and a bag stops, since the limits would stop every part alike
                conducted = any(p.status == PointStatus.OK and p.id >= plan.detect_floor_a() for p in ups)
                raise _Stop(f"next setpoint refused by the safety limits ({exc})",
                            interrupted=not conducted) from None
            # a fit-targeted sweep keeps its first conducting reading, however high: strong inversion informs the fit
            judge = None if aim_at_fit else (lambda p: overshoots(plan, ups, p, refinements))
            point = self.measure(step.level, "up", step.expect_id, step.expect_vgs, judge=judge)
            self.check_reading(point, ups)
            if point.status == PointStatus.PROBE:  # back to the last setpoint below conduction, finer steps
                search_step, refinements = search_step / REFINE_FACTOR, refinements + 1
                continue
            level = step.level
            ups.append(point)
            if not aim_at_fit and point.usable and point.id >= plan.max_current_a * 0.98:
                return "reached the top target current"

    def check_leakage(self, ups: list[SweepPoint]) -> None:
        """Fit-targeted sweeps: readings low enough to judge leakage by (at most three, each lower), when the
        points so far hold none (see :func:`benchlab.sweep.fit_targeting.leak_check_level`)."""
        for _ in range(3):
            level = leak_check_level(self.plan, ups)
            if level is None:
                return
            if self.plan.fixture == Fixture.RESISTOR:
                self.source.check_voltage(level)
            else:
                self.source.check_level(level)
            ups.append(self.measure(level, "up"))

    def sweep_levels(self, levels, direction: str, expects=None) -> None:
        """Step through explicit levels (voltages, or currents on a SMU forcing current)."""
        self.source_on_if_continuous()
        forcing_current = self.plan.mode == SweepMode.CURRENTS
        for n, level in enumerate(levels):
            previous = [p for p in self.points if p.direction == direction]
            expect_id = expect_vgs = None
            if expects is not None:
                expect_id, expect_vgs = expects[n]
            elif forcing_current:
                conducting = [(p.vgs, p.id) for p in previous if p.usable and p.id > 0 and p.status == PointStatus.OK]
                if conducting:
                    expect_vgs = predict_vgs(sorted(conducting, key=lambda c: c[1]), level)
                    if level * expect_vgs > self.plan.limits.max_power_w:
                        raise _Stop(f"next point would exceed max_power_w ({self.plan.limits.max_power_w:g} W)")
            point = self.measure(float(level), direction, expect_id, expect_vgs)
            self.check_reading(point, previous)

    def sweep_list(self) -> None:
        """SMU list sweep: upload the voltages in chunks, one trigger per chunk, store each chunk."""
        plan = self.plan
        self.source.set_output(True)
        levels = list(plan.voltages)
        for start in range(0, len(levels), plan.list_chunk):
            self.check_interrupt()
            chunk = levels[start:start + plan.list_chunk]
            readings = self.source.run_list(chunk, plan.settle_s)
            first = len(self.points)
            for v, i in readings:  # store the whole chunk first: every reading taken is kept
                if not (math.isfinite(v) and math.isfinite(i) and abs(v) < 1e30):
                    status = PointStatus.OVER_RANGE
                else:  # a list returns no compliance flag: a current at the compliance is one
                    status = PointStatus.COMPLIANCE if abs(i) >= 0.98 * self.source.compliance else PointStatus.OK
                self.store(SweepPoint(point=len(self.points), time_s=self.clock() - self.t0, vgs=float(v),
                                      id=float(i), v_source=float(v), i_source=float(i), status=status,
                                      direction="up"))
            for k in range(first, len(self.points)):
                self.check_reading(self.points[k], self.points[:k])

    def fit_compliance_to_power(self, level: float) -> None:
        """SMU forcing volts, before the part conducts: lower the current compliance to max_power_w / level.

        With no current predicted the guard takes the worst case, level x compliance (a part whose VGS at
        the compliance equals the setpoint); a compliance set for the top target current would then stop
        the search for conduction below threshold and a good part would be judged open. The output is
        switched off while the compliance changes (the guard allows no reconfiguration while it is on).
        """
        if self.source.mode != SourceFunction.VOLTAGE or level <= 0:
            return
        allowed = self.plan.limits.max_power_w / level * (1.0 - 1e-6)
        if allowed >= self.source.compliance or allowed < 10 * self.plan.detect_floor_a():
            return  # nothing to do, or too little current left to sweep: the guard refuses the step
        was_on = self.source.output_is_on()
        if was_on:
            self.source.set_output(False)
        self.source.prepare("voltage", allowed)
        if was_on and not self.pulsed:
            self.source.set_output(True)

    def source_on_if_continuous(self) -> None:
        if not self.pulsed and not self.source.output_is_on():
            self.source.set_output(True)

    def down_sweep(self) -> None:
        """Replay the up-sweep's setpoints in reverse (the top one excluded)."""
        ups = [p for p in self.points if p.direction == "up" and p.usable and p.id >= self.plan.detect_floor_a()]
        if len(ups) < 2:
            return
        if self.plan.mode == SweepMode.CURRENTS:
            levels = [p.id for p in ups[:-1]]
            expects = [(p.id, p.vgs) for p in ups[:-1]]
        elif self.plan.fixture == Fixture.RESISTOR:
            levels = [p.v_source for p in ups[:-1]]
            expects = [(p.id, p.vgs) for p in ups[:-1]]
        else:
            levels = [p.vgs for p in ups[:-1]]
            expects = [(p.id, p.vgs) for p in ups[:-1]]
        levels = [max(0.0, float(v)) for v in levels]
        self.sweep_levels(levels[::-1], "down", expects[::-1])

    def body(self) -> str:
        plan = self.plan
        if plan.mode == SweepMode.TARGETS:
            reason = self.sweep_targets()
        elif plan.mode == SweepMode.CURRENTS:
            self.sweep_levels(plan.forced_currents(), "up")
            reason = "swept every target current"
        elif plan.use_list:
            self.sweep_list()
            reason = "swept every listed voltage"
        else:
            self.sweep_levels(plan.voltages, "up")
            reason = "swept every listed voltage"
        return reason

    def outcome(self, complete: bool, stop_reason: str, failure: str | None, error: str | None,
                problems: list[str]) -> SweepOutcome:
        plan = self.plan
        judged = in_setpoint_order(self.points) if plan.vth_stderr_v is not None else self.points
        verdict = classify(judged, detect_current_a=plan.detect_floor_a(), leak_current_a=plan.leak_current_a,
                           reference_current_a=REFERENCE_CURRENT_A, failure=failure, fixture=plan.fixture)
        kind, reason = verdict.kind, verdict.reason
        if not complete:
            # a sweep cut short judges nothing: never a dud class (a good part would be rejected for good);
            # what the points showed so far stays in the reason
            kind = PartClass.INTERRUPTED
            reason = (f"sweep interrupted after {len(self.points)} points ({stop_reason}); the part was not judged: "
                      f"sweep it again" + (f" (the points so far: {verdict.reason})" if self.points else ""))
        return SweepOutcome(label=self.label, complete=complete, stop_reason=stop_reason,
                            classification=kind, reason=reason, points=tuple(self.points),
                            powered_s=self.source.powered_s, elapsed_s=self.clock() - self.t0,
                            vgs_at_ref=vgs_at_current(judged, REFERENCE_CURRENT_A, plan.detect_floor_a()),
                            reference_current_a=REFERENCE_CURRENT_A, error=error,
                            shutdown_problems=tuple(problems))


def preflight(plan: SweepPlan, instruments: Any) -> None:
    """Send the settings a sweep of ``plan`` starts with, switching nothing on, and switch off again.

    Output off, current limit / compliance, setpoint 0, meter function and integration time, each
    followed by the instrument's error queue. A caller runs this before it writes any record, so a
    wrong instrument on a resource or a profile that does not fit the instrument gives one error
    and leaves nothing on disk.

    Raises
    ------
    BenchlabError
        The plan's or the instrument's error (``InstrumentReportedError`` keeps the instrument's code
        and text); the output has been switched off again.
    """
    validate_plan(plan)
    sweep = _Sweep(plan, instruments, None, None, "preflight", None, time.monotonic, time.sleep)
    try:
        sweep.setup()
    except BaseException:
        sweep.source.safe_off()
        raise
    problems = sweep.source.safe_off()
    if problems:
        # a bench that cannot confirm its output off must not start a sweep (docs/sweeps.md): nothing is written
        raise InstrumentError("the pre-sweep check could not confirm the output off (" + "; ".join(problems) +
                              "); nothing was swept or written: check the instrument and its profile")


def run(plan: SweepPlan, instruments: Any, on_event: Callable[[Any], None] | None = None, cancel=None, *,
        label: str = "part", recorder=None, clock: Callable[[], float] = time.monotonic,
        sleep: Callable[[float], None] = time.sleep, vth_stderr: Callable[[list], float] | None = None
        ) -> SweepOutcome:
    """Sweep one diode-connected part and return how it went.

    Parameters
    ----------
    plan : SweepPlan
        What to do (validated here first: bad input raises before anything is sent).
    instruments : object
        Anything with ``supply`` and ``meter`` (resistor fixture) or ``smu`` (smu fixture)
        attributes implementing the role interfaces of :mod:`benchlab.instruments.roles`, e.g. a ``Bench``.
    on_event : callable, optional
        Receives :class:`PointMeasured`, :class:`SweepDone` and :class:`SweepFault` events.
    cancel : threading.Event-like, optional
        Checked before each point; when set the sweep stops, the output goes off, and the outcome
        has ``complete=False``.
    label : str
        The part's label (events and outcome).
    recorder : object, optional
        ``append(point)`` (must make the point durable) and ``finish(outcome)``, e.g. a
        :class:`benchlab.sweep.session.SweepRecorder`.
    clock, sleep : callable
        Injected time source and wait (tests run without real waits).
    vth_stderr : callable, optional
        ``vth_stderr(points) -> float``: the running fit's Vth standard error (V) of the points so far;
        needed by a plan with ``vth_stderr_v`` (the services pass the fitter's).

    Returns
    -------
    SweepOutcome

    Raises
    ------
    BenchlabError
        Instrument errors, timeouts, lost connections and :class:`SweepCancelled` (SIGTERM) are
        re-raised after the output is off and the record is marked incomplete; so is
        ``KeyboardInterrupt``.
    """
    validate_plan(plan)
    if plan.vth_stderr_v is not None and vth_stderr is None:
        raise InputError("a sweep aimed at a Vth standard error (vth_stderr_v) needs the running fit (vth_stderr)")
    sweep = _Sweep(plan, instruments, on_event, cancel, label, recorder, clock, sleep, vth_stderr)
    complete, failure, error, stop_reason = False, None, None, "not started"
    try:
        sweep.setup()
        try:
            stop_reason = sweep.body()
            complete = True
        except _Stop as stop:
            stop_reason, failure = stop.reason, stop.failure
            complete = not stop.interrupted
        if complete and plan.down_sweep and failure is None:
            try:
                sweep.down_sweep()
            except _Stop as stop:
                if stop.interrupted:
                    complete, stop_reason = False, stop.reason
                else:
                    failure = stop.failure
                    stop_reason = f"down-sweep: {stop.reason}"
    except BaseException as exc:
        problems = sweep.source.safe_off()
        kind = type(exc).__name__
        message = str(exc) or ("interrupted (Ctrl-C)" if isinstance(exc, KeyboardInterrupt) else kind)
        outcome = sweep.outcome(False, f"{kind}: {message}", None, message, problems)
        try:
            sweep.recorder.finish(outcome)
        finally:
            sweep.on_event(SweepFault(label, message, kind, outcome.elapsed_s, tuple(problems)))
        raise
    problems = sweep.source.safe_off()
    outcome = sweep.outcome(complete, stop_reason, failure, None, problems)
    sweep.recorder.finish(outcome)
    sweep.on_event(SweepDone(label, outcome.complete, outcome.classification, outcome.reason, len(outcome.points),
                             outcome.elapsed_s, outcome.summary()))
    return outcome


__all__ = ["preflight", "run"]
