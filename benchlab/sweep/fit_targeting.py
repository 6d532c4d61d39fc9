"""Fit-targeted stepping (``plan.vth_stderr_v``): spend a sweep's points where they inform the fitted threshold,
and stop once the running fit's Vth standard error reaches the requested value.

Pure decisions, no I/O (the engine measures; the fit itself is injected by the services, since the sweep layer
does not import the fitter). Three phases:

1. a coarse search for conduction. On the resistor fixture the next supply voltage is the last VGS plus
   ``R x I_top``: a part whose current rises with its voltage cannot then carry more than the top target
   (load line, R less its tolerance), so the search jumps straight into strong inversion instead of creeping up
   in ``search_step_v`` steps. A SMU has no resistor to bound the jump and keeps the ``search_step_v`` search.
2. points placed on a grid of currents, evenly in log(current) from I_top / 50 to I_top (the knee and strong
   inversion, where the threshold and KP are decided), plus the 250 uA reference when it lies inside: each next
   point goes to the lowest grid current that no measured point is near yet (within half a grid step), so the
   points spread over the window whatever the search found; once each grid current has a point the grid is
   halved.
3. after each conducting point, from 6 on, the injected fit gives the Vth standard error; the sweep stops when
   it is at or below ``plan.vth_stderr_v``, or after ``plan.points`` conducting points (the budget).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from benchlab.kinds import Fixture, PointStatus
from benchlab.sweep.plan import REFERENCE_CURRENT_A, SweepPlan
from benchlab.sweep.classify import LEAK_VGS_FRACTION
from benchlab.sweep.records import SweepPoint, vgs_at_current
from benchlab.sweep.stepping import DEFAULT_SLOPE_V_PER_DECADE, MIN_STEP_V, Step, StopStepping

# The grid spans I_top / 50 .. I_top (1.7 decades: the knee and strong inversion) with 6 currents to start: on the
# simulated bag six points so spread gave a Vth standard error of 0.8-1.3 mV where six evenly spread in supply volts
# above threshold gave 2.2-2.8 mV (benchmarks/README.md); fewer than six leave the automatic model choice only the
# square law, whose misfit near the knee keeps the error above 3 mV.
WINDOW_DECADES = math.log10(50.0)
FIRST_GRID = 6  # grid currents before the first halving
MIN_FIT_POINTS = 6  # conducting points before the running fit is asked
DEGENERATE_STDERR_V = 1e-5
LOAD_LINE_MARGIN = 0.9  # the search's jump aims at 90 % of the top target at most


def conducting(plan: SweepPlan, ups: Sequence[SweepPoint]) -> list[tuple[float, float]]:
    """(VGS, ID) of the up-sweep's conducting ``ok`` points, by rising current."""
    floor = plan.detect_floor_a()
    return sorted(((p.vgs, p.id) for p in ups if p.status == PointStatus.OK and p.id >= floor),
                  key=lambda c: c[1])


def grid_currents(plan: SweepPlan, halvings: int) -> np.ndarray:
    """The candidate currents (A): evenly in log(current) over the window below the top target, with the
    250 uA reference when it lies inside; ``halvings`` times halved."""
    top = plan.max_current_a
    low = max(top / 10 ** WINDOW_DECADES, plan.min_current_a)
    grid = np.geomspace(low, top, (FIRST_GRID - 1) * 2 ** halvings + 1)
    if low < REFERENCE_CURRENT_A < top:
        grid = np.unique(np.append(grid, REFERENCE_CURRENT_A))
    return grid


def next_target(plan: SweepPlan, measured: Sequence[float]) -> float:
    """The lowest grid current with no measured current within half a grid step (in log(current)); once every
    grid current has one, the grid is halved. Going up the grid keeps the part's heating monotonic."""
    logs = np.log(np.asarray(measured, dtype=float))
    for halvings in range(8):
        grid = grid_currents(plan, halvings)
        spacing = math.log(grid[-1] / grid[0]) / ((FIRST_GRID - 1) * 2 ** halvings)
        distance = np.min(np.abs(np.log(grid)[:, None] - logs[None, :]), axis=1)
        open_ = np.flatnonzero(distance > 0.5 * spacing)
        if open_.size:
            return float(grid[open_[0]])
    return float(plan.max_current_a)


def interpolation_base(plan: SweepPlan, ups: Sequence[SweepPoint],
                       seen: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """The conducting points, and below them the search's last reading under the detection floor when it
    shows a positive current (a sub-threshold reading: too faint to fit, close enough to aim between).

    A reading at or below ``LEAK_VGS_FRACTION`` of the lowest conducting VGS is not such a reading: that far below
    threshold a healthy part carries next to nothing (the classifier's leak region), so its current is leakage
    and the meter's noise, no guide to the sub-threshold slope. Aiming through it (a few nA read at 1 V, the
    part conducting at 2.8 V: 0.3 V per decade, three times a real sub-threshold slope) put the first grid point
    a decade and more below its target on the simulated bench, a reading the grid then had to take again; the
    slope guess of :mod:`benchlab.sweep.stepping` is used instead.
    """
    lowest_vgs = min(v for v, _ in seen)
    below = [(p.vgs, p.id) for p in ups if p.status == PointStatus.OK and 0 < p.id < seen[0][1] / 10
             and p.id < plan.detect_floor_a() and math.isfinite(p.vgs) and p.vgs < seen[0][0]
             and p.vgs > LEAK_VGS_FRACTION * lowest_vgs]
    return ([max(below)] if below else []) + seen


def first_level(plan: SweepPlan) -> float:
    """Where a fit-targeted sweep starts. On the resistor fixture: half the load line's jump from 0 V (no
    diode-connected part takes more than V / R there: at most 45 % of the top target), a reading that for most parts
    also serves the leak check (a point at half the VGS of conduction or below, :mod:`benchlab.sweep.classify`)
    and from which the jump still reaches conduction; ``start_v`` only when it lies above the whole jump. With
    ``plan.prior_leak_scale_v`` (the parts swept before in the session) no higher than 0.9 x half of it, so the
    reading lies in the leak region of a part like them also where half the jump would not (a large R x I_top:
    at 100 mA through 47 ohm half the jump is 2.1 V, above the leak region of a 2.6 V part, and the leak check
    took a reading of its own at the end). Only ever lowered by the prior: every jump stays bounded by the load
    line as without it. On a SMU: ``start_v``."""
    if plan.fixture != Fixture.RESISTOR:
        return plan.start_v
    jump = LOAD_LINE_MARGIN * plan.worst_case_resistor_ohm() * plan.max_current_a
    if plan.start_v > jump:
        return plan.start_v
    level = 0.5 * jump
    if plan.prior_leak_scale_v is not None:
        level = min(level, 0.9 * LEAK_VGS_FRACTION * plan.prior_leak_scale_v)
    return round(min(level, plan.limits.max_supply_v), 6)


def leak_scale_v(plan: SweepPlan, points: Sequence[SweepPoint]) -> float | None:
    """The VGS the classifier scales the leak region by (:func:`benchlab.sweep.classify.classify`): VGS at the
    250 uA reference along the up-sweep's setpoints, else the lowest VGS of a conducting point; None when
    nothing conducted."""
    ups = in_setpoint_order(points)
    scale = vgs_at_current(ups, REFERENCE_CURRENT_A, plan.detect_floor_a())
    if scale is None:
        seen = conducting(plan, ups)
        if not seen:
            return None
        scale = min(v for v, _ in seen)
    return scale


def leak_check_level(plan: SweepPlan, ups: Sequence[SweepPoint]) -> float | None:
    """A setpoint at which the part's leakage can be judged, when no point so far is at or below
    ``LEAK_VGS_FRACTION`` x the VGS of the reference current (or of the onset of conduction); None when one is.
    The classifier needs such a point to tell a leaky part (docs/sweeps.md); the search does not always leave one.
    """
    ups = in_setpoint_order(ups)
    scale = leak_scale_v(plan, ups)
    if scale is None:
        return None
    if any(0 < p.vgs <= LEAK_VGS_FRACTION * scale for p in ups if p.direction == "up" and p.usable):
        return None
    return round(0.9 * LEAK_VGS_FRACTION * scale, 6)


def in_setpoint_order(points: Sequence[SweepPoint]) -> list[SweepPoint]:
    """The up-sweep's points by rising setpoint, then the rest as measured: a fit-targeted sweep visits its
    setpoints out of order, and the curve the classifier reads (VGS at the reference current, the leak check) is
    the one along the setpoints."""
    ups = sorted((p for p in points if p.direction == "up"), key=lambda p: p.v_source)
    return ups + [p for p in points if p.direction != "up"]


def interpolate_vgs(points: Sequence[tuple[float, float]], current_a: float) -> float:
    """VGS (V) at ``current_a``, linear in log(current) between the measured points around it, extended along
    the end segment beyond them (with one point, the sub-threshold slope guess of :mod:`stepping`).

    Above threshold VGS grows faster than linearly in log(current), so extending upwards under-predicts VGS and
    the current lands below its target: the safe side.
    """
    vgs = np.array([p[0] for p in points])
    logs = np.log10([p[1] for p in points])
    if len(points) == 1:
        return float(vgs[0] + DEFAULT_SLOPE_V_PER_DECADE * (math.log10(current_a) - logs[0]))
    x = math.log10(current_a)
    k = int(np.clip(np.searchsorted(logs, x), 1, len(points) - 1))
    span = logs[k] - logs[k - 1]
    slope = (vgs[k] - vgs[k - 1]) / span if span > 1e-9 else DEFAULT_SLOPE_V_PER_DECADE
    slope = max(slope, 0.0)
    return float(vgs[k - 1] + slope * (x - logs[k - 1]))


def next_fit_step(plan: SweepPlan, ups: Sequence[SweepPoint], level: float) -> Step:
    """The next setpoint of a fit-targeted sweep (phases 1 and 2 of the module docstring).

    Raises
    ------
    StopStepping
        When no further step may or need be taken (open part, limit, point cap).
    """
    lim = plan.limits
    if len(ups) >= plan.max_measured_points:
        raise StopStepping(f"stopped after {len(ups)} points (max_measured_points)")
    seen = conducting(plan, ups)
    resistor = plan.fixture == Fixture.RESISTOR
    r = plan.series_resistor_ohm if resistor else 0.0
    if not seen:
        last = ups[-1]
        if math.isfinite(last.vgs) and last.vgs >= plan.max_search_v:
            raise StopStepping(f"no conduction with {last.vgs:.2f} V across the part (max_search_v)")
        last_vgs = max(last.vgs if math.isfinite(last.vgs) else level, 0.0)
        if resistor:
            r_low = plan.worst_case_resistor_ohm()
            nxt = max(last_vgs + LOAD_LINE_MARGIN * r_low * plan.max_current_a, level + plan.search_step_v)
            if level < plan.max_search_v:  # an open part shows max_search_v across it, not a jump beyond
                nxt = min(nxt, plan.max_search_v)
            expect_id = min(max(nxt - last_vgs, 0.0) / r_low, plan.current_limit())
        else:
            nxt, expect_id = level + plan.search_step_v, None
        expect_vgs = nxt
    else:
        target = next_target(plan, [c[1] for c in seen])
        base = interpolation_base(plan, ups, seen)
        vgs_pred = interpolate_vgs(base, target)
        if target * vgs_pred > lim.max_power_w:
            target = 0.95 * lim.max_power_w / max(vgs_pred, 1e-3)
            vgs_pred = interpolate_vgs(base, target)
        nxt = max(vgs_pred + target * r, MIN_STEP_V)
        if abs(nxt - level) < MIN_STEP_V:  # the same setpoint again tells nothing new
            nxt = level + MIN_STEP_V
        expect_id, expect_vgs = min(target, lim.max_drain_a), vgs_pred
    nxt = round(min(nxt, lim.max_supply_v), 6)
    if nxt <= level and not seen:
        raise StopStepping(f"reached max_supply_v ({lim.max_supply_v:g} V)")
    return Step(nxt, expect_id, expect_vgs)


def fit_reached(plan: SweepPlan, ups: Sequence[SweepPoint], vth_stderr) -> str | None:
    """The stop reason once the running fit's Vth standard error is at or below ``plan.vth_stderr_v`` or the
    point budget is spent; None to go on. ``vth_stderr(points) -> float`` is the injected fit."""
    count = len(conducting(plan, ups))
    if count < MIN_FIT_POINTS:
        return None
    err = float(vth_stderr(list(ups)))
    # a standard error under 10 uV says the fit sits on a parameter's bound (a degenerate fit), not that the
    # threshold is known that well: such a fit does not end the sweep
    if DEGENERATE_STDERR_V < err <= plan.vth_stderr_v:
        return f"Vth standard error {err * 1e3:.2f} mV <= {plan.vth_stderr_v * 1e3:g} mV after {count} points"
    if count >= plan.points:
        shown = f"{err * 1e3:.2f} mV" if math.isfinite(err) else "not available"
        return (f"point budget ({plan.points}) spent: Vth standard error {shown}, "
                f"requested {plan.vth_stderr_v * 1e3:g} mV")
    return None
