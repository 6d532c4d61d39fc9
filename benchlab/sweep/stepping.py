"""Pure decisions of the sweep: the next adaptive setpoint, and whether a reading ends the sweep.

No I/O here: the engine (:mod:`benchlab.sweep.engine`) measures, these functions decide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

from benchlab.sweep.plan import SweepPlan
from benchlab.sweep.records import SweepPoint
from benchlab.kinds import Fixture, PointStatus

# Sub-threshold slope assumed before two conducting points exist: n UT ln10 with n about 1.7
# (S = n x 59.5 mV/decade at 300 K; Enz, Krummenacher, Vittoz 1995). A steeper guess would overshoot.
DEFAULT_SLOPE_V_PER_DECADE = 0.1
MIN_SLOPE_V_PER_DECADE = 0.04
MIN_STEP_V = 1e-3


class StopStepping(Exception):
    """The sweep should stop stepping up (not an error). ``failure`` is set when the part failed;
    ``interrupted`` when the sweep was cut short (cancel, time limit) and its record stays incomplete."""

    def __init__(self, reason: str, failure: str | None = None, *, interrupted: bool = False):
        super().__init__(reason)
        self.reason = reason
        self.failure = failure
        self.interrupted = interrupted


@dataclass(frozen=True)
class Step:
    """The next setpoint and what it is predicted to do (for the safety guard)."""

    level: float
    expect_id: float | None
    expect_vgs: float | None


def predict_vgs(conducting: Sequence[tuple[float, float]], target_a: float) -> float:
    """Predict VGS (V) at ``target_a`` from measured ``(vgs, id)`` pairs (ascending, conducting).

    Straight-line extrapolation of VGS against log(current) through the last two points; with one
    point, the sub-threshold slope guess. Above threshold VGS grows faster than linearly in
    log(current), so this under-predicts and the sweep undershoots: the safe side.
    """
    vgs1, id1 = conducting[-1]
    slope = DEFAULT_SLOPE_V_PER_DECADE
    for vgs0, id0 in reversed(conducting[:-1]):
        if id1 > id0 * 1.05:
            slope = max((vgs1 - vgs0) / math.log10(id1 / id0), MIN_SLOPE_V_PER_DECADE)
            break
    return vgs1 + slope * math.log10(target_a / id1)


REFINE_FACTOR = 5  # a search step that overshot is retried this many times finer
MAX_REFINEMENTS = 2


def overshoots(plan: SweepPlan, ups: Sequence[SweepPoint], point: SweepPoint, refinements: int) -> bool:
    """True when ``point`` is the first conducting reading of the search and landed far above the first
    target (a steep turn-on, or a coarse current resolution): the search then steps back and retries finer.

    Such a reading is recorded with status ``probe`` (kept, not fitted).
    """
    if refinements >= MAX_REFINEMENTS or point.status != PointStatus.OK:
        return False
    floor = plan.detect_floor_a()
    if any(p.status == PointStatus.OK and p.id >= floor for p in ups):
        return False  # the search is over: later points are targeted, not searched
    return point.id > 4.0 * max(plan.min_current_a, floor)


def next_adaptive_step(plan: SweepPlan, ups: Sequence[SweepPoint], level: float,
                       search_step_v: float | None = None) -> Step | None:
    """The next setpoint of an adaptive (``targets``) up-sweep, or None once the top target is reached.

    Parameters
    ----------
    plan : SweepPlan
        The plan (limits, targets, resistor).
    ups : sequence of SweepPoint
        The up-sweep's points so far (at least one).
    level : float
        The setpoint of the last point (V).
    search_step_v : float, optional
        Step while searching for conduction (default ``plan.search_step_v``; finer after an overshoot).

    Raises
    ------
    StopStepping
        When no further step may or need be taken (open part, limit, point cap).
    """
    lim = plan.limits
    r = plan.series_resistor_ohm if plan.fixture == Fixture.RESISTOR else 0.0
    if len(ups) >= plan.max_measured_points:
        raise StopStepping(f"stopped after {len(ups)} points (max_measured_points) below the top current")
    floor = plan.detect_floor_a()
    conducting = [(p.vgs, p.id) for p in ups if p.status == PointStatus.OK and p.id >= floor]
    last = ups[-1]
    if not conducting:
        if math.isfinite(last.vgs) and last.vgs >= plan.max_search_v:
            raise StopStepping(f"no conduction with {last.vgs:.2f} V across the part (max_search_v)")
        nxt = level + (search_step_v or plan.search_step_v)
        last_vgs = last.vgs if math.isfinite(last.vgs) else level
        # a part whose current rises with voltage cannot let more than (Vs - VGS_last) / R through
        # (and the supply's current limit caps it in any case)
        # (R less its tolerance: the bound must hold for the smallest the resistor may be)
        r_low = plan.worst_case_resistor_ohm() if r else 0.0
        expect_id = min(max(nxt - max(last_vgs, 0.0), 0.0) / r_low, plan.current_limit()) if r else None
        expect_vgs = nxt
    else:
        above = [t for t in plan.target_currents() if t > conducting[-1][1] * 1.05]
        if not above:
            return None
        target = float(above[0])
        ordered = sorted(conducting, key=lambda c: c[1])
        vgs_pred = predict_vgs(ordered, target)
        if target * vgs_pred > lim.max_power_w:
            target = 0.95 * lim.max_power_w / vgs_pred
            if target <= conducting[-1][1] * 1.02:
                raise StopStepping(f"next point would exceed max_power_w ({lim.max_power_w:g} W)")
            vgs_pred = predict_vgs(ordered, target)
        nxt = min(max(vgs_pred + target * r, level + MIN_STEP_V), level + plan.max_step_v)
        expect_id, expect_vgs = min(target, lim.max_drain_a), vgs_pred
    nxt = round(nxt, 6)  # 1 uV steps keep the recorded setpoints readable (0.3, not 0.30000000000000004)
    if nxt > lim.max_supply_v:
        if level >= lim.max_supply_v * (1 - 1e-9):
            raise StopStepping(f"reached max_supply_v ({lim.max_supply_v:g} V)")
        nxt = lim.max_supply_v
    return Step(nxt, expect_id, expect_vgs)


def check_reading(plan: SweepPlan, point: SweepPoint, previous: Sequence[SweepPoint]) -> None:
    """Raise :class:`StopStepping` when ``point`` ends the sweep: a limit reached or the part failed.

    ``previous`` are the earlier points of the same direction.
    """
    lim = plan.limits
    floor = plan.detect_floor_a()
    if point.status == PointStatus.OVER_RANGE:
        recent = [p.status for p in list(previous)[-2:]] + [point.status]
        if len(recent) == 3 and all(s == PointStatus.OVER_RANGE for s in recent):
            raise StopStepping("three readings in a row over range")
        return
    conducting = [p for p in previous if p.id >= max(10 * floor, 1e-5) and p.status == PointStatus.OK]
    if conducting and point.status in (PointStatus.OK, PointStatus.COMPLIANCE):  # an unsettled reading proves no failure
        last = conducting[-1]
        if point.id < floor and point.vgs > last.vgs:
            raise StopStepping("part failed open", f"failed open during the sweep at point {point.point}: it carried "
                                                   f"{last.id:.3g} A at {last.vgs:.3f} V, then nothing at "
                                                   f"{point.vgs:.3f} V")
        if last.vgs > 0.5 and point.vgs < 0.3 * last.vgs and point.id > last.id:
            raise StopStepping("part failed short", f"failed short during the sweep at point {point.point}: "
                                                    f"{point.vgs * 1e3:.0f} mV across it at {point.id:.3g} A "
                                                    f"(was {last.vgs:.3f} V)")
    if point.status == PointStatus.COMPLIANCE:
        raise StopStepping("the source reached its current limit / compliance")
    if point.id >= lim.max_drain_a:
        raise StopStepping(f"reading reached max_drain_a ({lim.max_drain_a:g} A)")
    if point.id * point.vgs >= lim.max_power_w:
        raise StopStepping(f"reading reached max_power_w ({lim.max_power_w:g} W)")
