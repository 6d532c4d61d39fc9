"""Sweep plans: what to force, where to stop, how to pace the part. Plain data, validated up front.

A plan is checked against the bench's safety limits *before* anything is connected or powered
(:func:`validate_plan`), so bad input gets one clear error and nothing is written or powered.

Three ways to sweep a diode-connected part (VDS = VGS):

- ``targets`` (adaptive): aim at drain currents spread evenly in log(current) from the
  sub-threshold region up to ``max_current_a``. Stepping the supply evenly in volts crowds every
  point near threshold, because the current grows by decades over a few hundred mV there. VGS at a
  current is unknown beforehand, so the next setpoint is predicted from the points measured so far.
  Works with the resistor fixture (supply voltage) and a source-measure unit forcing voltage.
- ``voltages``: an explicit list of supply / SMU voltages (on a SMU optionally uploaded as lists).
- ``currents``: a source-measure unit forcing log-spaced currents; this is how datasheets state
  VGS(th) (VGS at 250 uA with VDS = VGS, common practice).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields
from typing import Any

import numpy as np

from benchlab.choices import CURRENT_FROM
from benchlab.errors import InputError, SafetyError
from benchlab.kinds import Fixture, SweepMode

MAX_SETTLE_S = 3600.0  # longest wait a setting may ask for (s): beyond it, a typing slip

FIXTURES = tuple(Fixture)
MODES = tuple(SweepMode)
REFERENCE_CURRENT_A = 250e-6
READBACK_RESOLUTION_V = 1e-3  # datasheet VGS(th) test current with VDS = VGS (common practice)


@dataclass(frozen=True)
class Limits:
    """The safety limits a plan runs under (a copy of the bench's, so the plan is self-contained)."""

    max_supply_v: float
    max_drain_a: float
    max_power_w: float

    @classmethod
    def from_safety_limits(cls, limits: Any) -> "Limits":
        """Build from any object with ``max_supply_v``, ``max_drain_a``, ``max_power_w``."""
        return cls(float(limits.max_supply_v), float(limits.max_drain_a), float(limits.max_power_w))


@dataclass(frozen=True)
class SweepPlan:
    """Everything the engine needs to sweep one part; reduces to plain data with :meth:`to_dict`.

    Parameters
    ----------
    fixture : str
        ``"resistor"`` (supply + series resistor + meter across the part) or ``"smu"``.
    limits : Limits
        Hard limits; no setpoint beyond them is ever applied.
    mode : str
        ``"targets"``, ``"voltages"`` or ``"currents"`` (see module docstring).
    points : int
        Number of target currents (``targets``/``currents`` modes).
    min_current_a, max_current_a : float
        First and last target current (A), spread evenly in log(current).
    voltages : tuple of float
        Explicit source voltages (``voltages`` mode), applied in order.
    series_resistor_ohm : float
        Measured series resistor (resistor fixture).
    series_resistor_tolerance : float
        Relative uncertainty of that measurement (0.005 = 0.5 %). The safety bounds assume the low end
        (:meth:`SweepPlan.worst_case_resistor_ohm`): a smaller resistor lets more current into the part.
    current_from : str
        Resistor fixture: where the drain current comes from. ``"meter"``: the meter switches to DC
        amps for a second reading at each point (its amps input in series with the part's source, its
        volts input across the part: both share the meter's LO terminal). ``"resistor"``: the drop
        across the series resistor, (supply readback - VGS) / R, which needs no rewiring but resolves
        only about (supply readback resolution) / R, e.g. 1 mV / 47 ohm = 21 uA.
    settle_s : float
        Wait after each setpoint before reading (s).
    nplc : float
        Meter integration time in power-line cycles.
    start_v : float
        First source voltage of an adaptive sweep (V); starting a little below the lowest threshold
        a datasheet allows saves the points spent searching for conduction.
    search_step_v : float
        Source step while the part does not yet conduct (V). Through a series resistor R a step of
        dV can raise the current by at most about dV / R, which bounds the first conducting point.
    max_search_v : float
        Give up looking for conduction once this much is across the part (V): the part is open.
        Power-MOSFET datasheets put VGS(th) below about 5 V (common practice), so 10 V is generous.
    max_step_v : float
        Largest source increase between two adaptive points (V).
    detect_current_a : float
        Current below which the part counts as not conducting (A).
    pulsed_duty : float or None
        Duty cycle in (0, 1]: the output is on only for settle + reading, then off for
        ``on_time * (1 / duty - 1)``. ``None`` keeps the output on for the whole sweep.
    down_sweep : bool
        Repeat the up-sweep's setpoints in reverse (hysteresis / self-heating check).
    repeat_reading : bool
        Read twice at each point and compare (detects parts whose readings do not settle).
    settle_by_prediction : bool
        With ``repeat_reading``: a first reading that lands on the curve the points so far predict is
        taken as settled without the repeat (the repeat is kept where nothing predicts the point).
    settle_tolerance : float
        Relative difference (of VGS) allowed between the two readings.
    max_rereads : int
        Further readings to wait for a point to settle before marking it ``unsettled``.
    use_list : bool
        ``voltages`` mode on a SMU: upload the setpoints as lists (chunks of ``list_chunk``).
    list_chunk : int
        Setpoints per uploaded list; a stop loses at most one chunk.
    leak_current_a : float
        Current that, flowing far below threshold, classifies the part as leaky (A).
    max_measured_points : int
        Hard cap on points per direction (adaptive stepping may need more points than targets).
    max_duration_s : float or None
        Time limit of one sweep (s); past it the sweep stops (output off, record incomplete), so slow
        instruments cannot keep a part powered indefinitely. None: no limit.
    vth_stderr_v : float or None
        ``targets`` mode: aim the points at the fit instead of at evenly spread currents, and stop once the
        running fit's Vth standard error is at or below this (V), or after ``points`` conducting points
        (:mod:`benchlab.sweep.fit_targeting`). None: the evenly spread targets.
    prior_leak_scale_v : float or None
        Fit-aimed sweeps on the resistor fixture: the lowest VGS the leak check was scaled by (VGS at the 250 uA
        reference, else at the onset of conduction) among the good parts swept before in this session (V). The
        first reading then goes no higher than 0.45 x this, inside the leak region of a part like them, so it
        serves the leak check and no reading is added for it at the end; never higher than without it. A bag
        sets it from its previous parts (:func:`benchlab.services.characterize.sweep_bag`). None: no prior.
    """

    fixture: str
    limits: Limits
    mode: str = "targets"
    points: int = 24
    min_current_a: float = 10e-6
    max_current_a: float = 0.1
    voltages: tuple[float, ...] = ()
    series_resistor_ohm: float = 0.0
    series_resistor_tolerance: float = 0.0
    current_from: str = "meter"
    settle_s: float = 0.05
    nplc: float = 1.0
    start_v: float = 0.0
    search_step_v: float = 0.1
    max_search_v: float = 10.0
    max_step_v: float = 0.5
    detect_current_a: float = 2e-6
    pulsed_duty: float | None = None
    down_sweep: bool = False
    repeat_reading: bool = True
    settle_by_prediction: bool = True
    settle_tolerance: float = 0.002
    max_rereads: int = 3
    use_list: bool = False
    list_chunk: int = 8
    leak_current_a: float = 20e-6
    max_measured_points: int = 200
    max_duration_s: float | None = 900.0
    vth_stderr_v: float | None = None
    prior_leak_scale_v: float | None = None

    def target_currents(self) -> np.ndarray:
        """The target currents (A), evenly spread in log(current), ascending."""
        return target_currents(self.min_current_a, self.max_current_a, self.points)

    def forced_currents(self) -> np.ndarray:
        """The currents a SMU forces in ``currents`` mode (A): the target currents, with the one nearest the
        250 uA reference replaced by exactly 250 uA when it lies in the range, so VGS(th) is measured as
        datasheets define it (at a fixed small drain current with VDS = VGS; common practice) rather than
        interpolated."""
        currents = self.target_currents()
        if self.min_current_a < REFERENCE_CURRENT_A < self.max_current_a:
            nearest = int(np.argmin(np.abs(np.log(currents / REFERENCE_CURRENT_A))))
            if 0 < nearest < len(currents) - 1:  # keep the end points the user asked for
                currents[nearest] = REFERENCE_CURRENT_A
            else:
                currents = np.sort(np.append(currents, REFERENCE_CURRENT_A))
        return currents

    def detect_floor_a(self) -> float:
        """Smallest current (A) the bench can tell from zero: ``detect_current_a``, or, when the current
        comes from the resistor drop, three steps of a 1 mV supply readback over R (a typical readback
        resolution, common practice)."""
        if self.fixture == Fixture.RESISTOR and self.current_from == "resistor" and self.series_resistor_ohm > 0:
            return max(self.detect_current_a, 3 * READBACK_RESOLUTION_V / self.series_resistor_ohm)
        return self.detect_current_a

    def worst_case_resistor_ohm(self) -> float:
        """The least the series resistor may be (ohm): the measured value less its tolerance."""
        return self.series_resistor_ohm * (1.0 - self.series_resistor_tolerance)

    def current_limit(self) -> float:
        """Supply current limit / SMU compliance (A): a margin above the top target, never above the limit."""
        return min(self.limits.max_drain_a, 1.25 * self.max_current_a)

    def to_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["voltages"] = list(self.voltages)
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "SweepPlan":
        known = {f.name for f in fields(cls)}
        values = {k: v for k, v in data.items() if k in known}
        values["limits"] = Limits(**data["limits"])
        values["voltages"] = tuple(float(v) for v in data.get("voltages", ()))
        return cls(**values)


def target_currents(min_current_a: float, max_current_a: float, points: int) -> np.ndarray:
    """``points`` currents from ``min_current_a`` to ``max_current_a`` spread evenly in log(current).

    Parameters
    ----------
    min_current_a, max_current_a : float
        End points (A), ``0 < min < max``.
    points : int
        How many (>= 2).

    Returns
    -------
    numpy.ndarray
        Ascending currents (A).
    """
    return np.geomspace(min_current_a, max_current_a, int(points))


def line_worst_power(supply_v: float, resistor_ohm: float, current_limit_a: float) -> float:
    """Most power (W) any two-terminal part can take when fed from ``supply_v`` through ``resistor_ohm``.

    The part sees V = Vs - I R, so P(I) = (Vs - I R) I, largest at I = Vs / 2R (maximum power
    transfer), and the supply's current limit caps I. Derived; the maximum power transfer theorem is
    textbook circuit theory.
    """
    if supply_v <= 0:
        return 0.0
    i_peak = supply_v / (2.0 * resistor_ohm)
    i_worst = min(i_peak, current_limit_a)
    return (supply_v - i_worst * resistor_ohm) * i_worst


def _positive(name: str, value: float) -> None:
    if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be a positive number, got {value!r}")


def validate_plan(plan: SweepPlan) -> SweepPlan:
    """Check a plan against itself and its limits; raise one clear error, else return it unchanged.

    Raises
    ------
    InputError
        An option value that makes no sense (negative points, unknown mode, ...).
    SafetyError
        A requested setpoint or range beyond the safety limits.
    """
    if plan.fixture not in FIXTURES:
        raise InputError(f"unknown fixture '{plan.fixture}' (expected one of {', '.join(FIXTURES)})")
    if plan.mode not in MODES:
        raise InputError(f"unknown sweep mode '{plan.mode}' (expected one of {', '.join(MODES)})")
    lim = plan.limits
    for name in ("max_supply_v", "max_drain_a", "max_power_w"):
        _positive(f"limit {name}", getattr(lim, name))
    for name in ("min_current_a", "max_current_a", "search_step_v", "max_step_v", "max_search_v", "detect_current_a",
                 "settle_tolerance", "leak_current_a", "nplc"):
        _positive(name, getattr(plan, name))
    if not (math.isfinite(plan.settle_s) and 0 <= plan.settle_s <= MAX_SETTLE_S):
        # an hour per point is a typing slip; 1e300 once overflowed the wait with the output on
        raise InputError(f"settle_s must be 0 to {MAX_SETTLE_S:g} s, got {plan.settle_s!r}")
    if not (math.isfinite(plan.start_v) and 0 <= plan.start_v <= lim.max_supply_v):
        raise SafetyError(f"start_v {plan.start_v!r} V must be between 0 and the bench limit max_supply_v {lim.max_supply_v:g} V")
    if not isinstance(plan.points, int) or plan.points < 2:
        raise InputError(f"points must be an integer >= 2, got {plan.points!r}")
    if plan.min_current_a >= plan.max_current_a:
        raise InputError(f"min_current_a {plan.min_current_a:g} A must be below max_current_a {plan.max_current_a:g} A")
    if plan.max_current_a > lim.max_drain_a:
        raise SafetyError(f"max_current_a {plan.max_current_a:g} A is above the bench limit max_drain_a "
                          f"{lim.max_drain_a:g} A")
    if plan.pulsed_duty is not None and not (0 < plan.pulsed_duty <= 1):
        raise InputError(f"pulsed duty cycle must be in (0, 1], got {plan.pulsed_duty!r}")
    if plan.pulsed_duty is not None and plan.use_list:
        raise InputError("a pulsed sweep cannot run as an uploaded list (the output must switch per point)")
    if plan.max_duration_s is not None and not (math.isfinite(plan.max_duration_s) and plan.max_duration_s > 0):
        raise InputError(f"max_duration_s must be a positive number of seconds, got {plan.max_duration_s!r}")
    if plan.vth_stderr_v is not None:
        if not (isinstance(plan.vth_stderr_v, (int, float)) and math.isfinite(plan.vth_stderr_v)
                and 0 < plan.vth_stderr_v <= 1.0):
            raise InputError(f"vth_stderr_v must be a standard error above 0 and at most 1 V, got {plan.vth_stderr_v!r}")
        if plan.mode != SweepMode.TARGETS:
            raise InputError(f"vth_stderr_v aims an adaptive sweep at the fit: it goes with mode 'targets', "
                             f"not '{plan.mode}'")
    if plan.prior_leak_scale_v is not None:
        _positive("prior_leak_scale_v", plan.prior_leak_scale_v)
    if plan.max_rereads < 0 or plan.list_chunk < 1 or plan.max_measured_points < plan.points:
        raise InputError("max_rereads must be >= 0, list_chunk >= 1 and max_measured_points >= points")
    if plan.fixture == Fixture.RESISTOR:
        _positive("series resistor (ohm)", plan.series_resistor_ohm)
        if not (math.isfinite(plan.series_resistor_tolerance) and 0 <= plan.series_resistor_tolerance < 0.5):
            raise InputError(f"series resistor tolerance must be a fraction from 0 to below 0.5, got "
                             f"{plan.series_resistor_tolerance!r}")
        if plan.mode == SweepMode.CURRENTS:
            raise InputError("forcing currents needs a source-measure unit (fixture 'smu')")
        if plan.use_list:
            raise InputError("list sweeps need a source-measure unit (fixture 'smu')")
        if plan.current_from not in CURRENT_FROM:
            raise InputError(f"unknown current source '{plan.current_from}' (expected one of "
                             f"{', '.join(CURRENT_FROM)})")
    if plan.mode == SweepMode.VOLTAGES:
        if not plan.voltages:
            raise InputError("a voltage-list sweep needs at least one voltage")
        for v in plan.voltages:
            if not (math.isfinite(v) and v >= 0):
                raise InputError(f"sweep voltages must be >= 0 V, got {v!r}")
            if v > lim.max_supply_v:
                raise SafetyError(f"sweep voltage {v:g} V is above the bench limit max_supply_v "
                                  f"{lim.max_supply_v:g} V")
            r_low = plan.worst_case_resistor_ohm()
            if plan.fixture == Fixture.RESISTOR and line_worst_power(v, r_low, plan.current_limit()) > lim.max_power_w:
                raise SafetyError(f"sweep voltage {v:g} V through {r_low:g} ohm (the resistor less its tolerance) "
                                  f"could put up to {line_worst_power(v, r_low, plan.current_limit()):.3g} W "
                                  f"in the part, above max_power_w {lim.max_power_w:g} W")
            if plan.fixture == Fixture.SMU and v * plan.current_limit() > lim.max_power_w:
                # on a SMU all of the source power lands in the part: compliance x voltage bounds it
                raise SafetyError(f"sweep voltage {v:g} V at compliance {plan.current_limit():g} A could put "
                                  f"{v * plan.current_limit():.3g} W in the part, above max_power_w "
                                  f"{lim.max_power_w:g} W")
    elif plan.voltages:
        raise InputError(f"an explicit voltage list only goes with mode 'voltages', not '{plan.mode}'")
    return plan


__all__ = ["Limits", "SweepPlan", "target_currents", "validate_plan", "REFERENCE_CURRENT_A", "FIXTURES", "MODES",
           "line_worst_power"]
