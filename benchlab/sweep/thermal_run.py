"""Running the thermal measurements on a bench: settle the fixture, sweep at each temperature, measure Rth.

Everything that powers the part goes through the safety guard (:class:`benchlab.sweep.safety.GuardedSmu`)
or the sweep engine; the output is switched off on every way out (done, error, cancel, Ctrl-C, SIGTERM),
and every reading is appended to a JSON-lines log (flushed and fsync'd) before the next one is taken.
Waiting uses an injected clock (``now()``, ``wait(s)``): the wall clock on a real bench, the simulator's
virtual clock on the simulated one.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np

from benchlab.errors import InstrumentError, SafetyError, SweepCancelled
from benchlab.sweep.engine import run
from benchlab.sweep.plan import Limits
from benchlab.sweep.thermal_bench import check_cancel as _check_cancel, forced_currents
from benchlab.sweep.thermal_plan import PACKAGE_RTH_K_PER_W, RthPlan, TempcoPlan


class ThermalLog:
    """Append-only JSON-lines record of a thermal run; each line is on disk before the next reading.

    ``listener(kind, values)``, when given, hears each line once it is on disk (progress for a UI).
    """

    def __init__(self, path: Path, listener: Callable[[str, dict], None] | None = None):
        self.path = Path(path)
        self._fh = open(self.path, "a", encoding="utf-8")
        self.listener = listener

    def add(self, kind: str, **values: Any) -> None:
        self._fh.write(json.dumps({"kind": kind, **values}, allow_nan=False, default=float) + "\n")
        self._fh.flush()
        os.fsync(self._fh.fileno())
        if self.listener is not None:
            self.listener(kind, values)

    def close(self) -> None:
        self._fh.close()


@dataclass(frozen=True)
class Settled:
    """A settled fixture: mean and scatter (K) of the readings over the settling window."""

    temperature_k: float
    sigma_k: float
    waited_s: float


def refuse_hot_fixture(thermal, log: ThermalLog | None = None) -> float:
    """Read the fixture once; refuse (SafetyError) when it is above ``max_fixture_k``. Returns the reading (K)."""
    now_k = thermal.read_k()
    if log is not None:
        log.add("sensor", temperature_k=now_k)
    limit = thermal.config.max_fixture_k
    if now_k > limit:
        raise SafetyError(f"the fixture is at {now_k - 273.15:.1f} degC, above the bench limit thermal.max_fixture_k "
                          f"{limit - 273.15:.1f} degC: let it cool before a thermal run")
    return now_k


def settle(thermal, clock, target_k: float | None, log: ThermalLog, *, cancel=None,
           say: Callable[[str], None] | None = None) -> Settled:
    """Set the fixture (when ``target_k`` is given) and wait until the bench's settling criterion holds.

    Raises
    ------
    SafetyError
        The fixture reads above ``thermal.max_fixture_k`` (plus the band).
    InstrumentError
        Not settled within ``settle_timeout_s``.
    """
    cfg = thermal.config
    if target_k is not None:
        thermal.set_k(target_k)
        log.add("fixture_setpoint", temperature_k=target_k)
    if thermal.manual_sensor:  # the operator reads the fixture when it is steady
        value = thermal.read_k()
        log.add("sensor", temperature_k=value, typed=True)
        return Settled(value, cfg.settle_band_k / 2.0, 0.0)
    controlled = target_k is not None and cfg.control.kind == "scpi"
    start = clock.now()
    readings: list[tuple[float, float]] = []
    while True:
        _check_cancel(cancel)
        t, value = clock.now() - start, thermal.read_k()
        log.add("sensor", t_s=t, temperature_k=value)
        if value > cfg.max_fixture_k + cfg.settle_band_k:
            raise SafetyError(f"the fixture reads {value:.2f} K, above thermal.max_fixture_k "
                              f"{cfg.max_fixture_k:.2f} K")
        readings.append((t, value))
        window = [v for (tt, v) in readings if tt >= t - cfg.settle_window_s]
        covered = readings[0][0] <= t - cfg.settle_window_s
        steady = covered and max(window) - min(window) <= cfg.settle_band_k
        near = (not controlled) or abs(float(np.mean(window)) - target_k) <= cfg.settle_band_k
        if steady and near:
            return Settled(float(np.mean(window)), float(np.std(window, ddof=1)) if len(window) > 1 else 0.0, t)
        if t > cfg.settle_timeout_s:
            raise InstrumentError(f"the fixture did not settle within {cfg.settle_timeout_s:g} s "
                                  f"({cfg.settle_criterion()}); last reading {value:.2f} K")
        if say is not None and len(readings) % 12 == 1:
            say(f"waiting for the fixture: {value:.2f} K" + (f" (setpoint {target_k:.2f} K)" if target_k else ""))
        clock.wait(cfg.poll_s)


def restore_fixture(thermal, start_k: float | None, log: ThermalLog | None) -> None:
    """Put a controlled fixture back to where it started (never raises: used on the way out)."""
    if start_k is None or thermal.config.control.kind != "scpi":
        return
    try:
        thermal.set_k(min(start_k, thermal.config.max_fixture_k))
        if log is not None:
            log.add("fixture_setpoint", temperature_k=start_k, restored=True)
    except BaseException:  # noqa: BLE001 - the way out must go on
        pass


# ------------------------------------------------------------------------------------------- temperature coefficients
def run_tempco(plan: TempcoPlan, bench: Any, thermal, clock, session, label: str, log: ThermalLog, *,
               on_event=None, cancel=None, say: Callable[[str], None] | None = None):
    """Sweep the part at each fixture temperature into ``session`` (one record per temperature).

    Returns
    -------
    list of (record label, SweepOutcome, temperature K, sigma K)
    """
    start_k = refuse_hot_fixture(thermal, log)
    done = []
    try:
        for k, target in enumerate(plan.temperatures_k):
            settled = settle(thermal, clock, target, log, cancel=cancel, say=say)
            if say is not None:
                say(f"fixture settled at {settled.temperature_k:.2f} K; sweeping {label}")
            record = f"{label}_T{k + 1}"
            recorder = session.start_part(record, {**plan.sweep.to_dict(), "fixture_temperature_k":
                                                   settled.temperature_k, "fixture_sigma_k": settled.sigma_k})
            outcome = run(plan.sweep, bench, on_event, cancel, label=record, recorder=recorder, clock=clock.now,
                          sleep=clock.wait)
            after = thermal.read_k()
            log.add("sensor", temperature_k=after, after_sweep=record)
            if not outcome.complete:
                raise SweepCancelled(f"the sweep at {target:.2f} K stopped: {outcome.stop_reason}")
            sigma = math.hypot(settled.sigma_k, (after - settled.temperature_k) / 2.0)
            done.append((record, outcome, (settled.temperature_k + after) / 2.0, sigma))
    finally:
        bench.safe_off()
        restore_fixture(thermal, start_k, log)
    return done


# ------------------------------------------------------------------------------------------- thermal resistance
def _heating_current(rb, power_w: float, v_sense: float, notes: list[str]) -> tuple[float, float]:
    """Forced current that dissipates about ``power_w``, found with short pulses; returns (current, VGS there)."""
    # start at a quarter of the power for a VGS 1 V above the sense voltage (VGS rises with current, so the first
    # pulse stays well under the target whatever the part), then aim at the power with the VGS just measured
    volts = v_sense + 1.0
    amps = min(0.25 * power_w / volts, rb.max_current(volts * 1.1))
    for _ in range(4):
        volts = rb.pulse(amps, volts * 1.1, "heating-current search")
        amps = min(power_w / (volts * 1.02), rb.max_current(volts * 1.1))
    if amps >= rb.max_current(volts * 1.1) * (1 - 1e-9):
        notes.append(f"heating current held at {amps:.3g} A by limits.max_drain_a / max_supply_v: "
                     f"{amps * volts:.3g} W instead of {power_w:g} W")
    return amps, rb.pulse(amps, volts * 1.1, "heating current, cold (pulsed)")


def run_rth(plan: RthPlan, bench: Any, thermal, clock, limits: Limits, log: ThermalLog, *, cancel=None,
            say: Callable[[str], None] | None = None, rth_guess_k_per_w: float = PACKAGE_RTH_K_PER_W) -> dict:
    """K-factor calibration, heating at a known power, switch to the sense current, cooling readings.

    Returns the raw numbers (see :func:`benchlab.extract.thermal.rth_electrical` for the arithmetic).
    """
    cfg = thermal.config
    notes: list[str] = []
    start_k = refuse_hot_fixture(thermal, log)
    rb = forced_currents(bench, limits, plan, clock, log, cancel)
    try:
        reference = settle(thermal, clock, start_k if cfg.control.kind == "scpi" else None, log, cancel=cancel,
                           say=say)
        t0 = reference.temperature_k
        t1 = t0 + plan.calibration_rise_k
        if t1 > cfg.max_fixture_k:
            raise SafetyError(f"the K-factor calibration needs the fixture at {t1:.2f} K, above thermal.max_fixture_k "
                              f"{cfg.max_fixture_k:.2f} K: lower calibration_rise_k or start cooler")
        power = plan.heating_power_w or cfg.max_heating_w
        power = min(power, cfg.max_heating_w, limits.max_power_w)
        ceiling = (cfg.max_junction_k - t0) / rth_guess_k_per_w
        if power > ceiling:
            notes.append(f"heating power lowered to {ceiling:.3g} W so that the junction stays below "
                         f"thermal.max_junction_k at {rth_guess_k_per_w:g} K/W")
            power = ceiling
        v_cold, v_cold_err = rb.sense(plan.calibration_readings, "sense, reference temperature")
        i_heat, v_heat_cold = _heating_current(rb, power, v_cold, notes)
        # K-factor: the sense voltage (and the heating-current voltage, for the pulsed/DC check) at a second temperature
        hot = settle(thermal, clock, t1, log, cancel=cancel, say=say)
        v_hot, v_hot_err = rb.sense(plan.calibration_readings, "sense, calibration temperature")
        v_heat_hot = rb.pulse(i_heat, v_heat_cold * 1.1, "heating current, calibration temperature (pulsed)")
        back = settle(thermal, clock, t0 if cfg.control.kind == "scpi" else None, log, cancel=cancel, say=say)
        v_cold2, _ = rb.sense(plan.calibration_readings, "sense, before heating")
        dvdt_heat = (v_heat_hot - v_heat_cold) / (hot.temperature_k - reference.temperature_k)
        # heat
        rb.force(i_heat, v_heat_cold)
        rb.on()
        began = clock.now()
        trace: list[float] = []
        steady = False
        while clock.now() - began < cfg.max_heating_s:
            clock.wait(min(plan.check_interval_s, cfg.max_heating_s - (clock.now() - began)))
            volts, amps = rb.read("heating", t_heat_s=clock.now() - began)
            trace.append(volts)
            if volts * amps > limits.max_power_w:
                raise SafetyError(f"heating power {volts * amps:.3g} W passed limits.max_power_w {limits.max_power_w:g} W "
                                  "(the part's VGS rose while heating); heating stopped")
            if abs(dvdt_heat) > 2e-4 and back.temperature_k + (volts - v_heat_cold) / dvdt_heat > cfg.max_junction_k:
                raise SafetyError(f"the junction passed thermal.max_junction_k {cfg.max_junction_k:.2f} K while "
                                  "heating (from its own VGS); heating stopped")
            if clock.now() - began >= plan.min_heating_s and len(trace) >= 3 and \
                    abs(trace[-1] - trace[-2]) < plan.steady_v and abs(trace[-2] - trace[-3]) < plan.steady_v:
                steady = True
                break
        if not steady:
            notes.append(f"not at steady state after thermal.max_heating_s {cfg.max_heating_s:g} s: the Rth is a "
                         "lower bound")
        heated_s = clock.now() - began
        power_w = volts * amps
        # switch to the sense current and read the cooling junction
        rb.force(plan.sense_current_a)
        switched = clock.now()
        times, cooling, previous = [], [], 0.0
        for _ in range(plan.cooling_readings):
            v, _ = rb.read("cooling")
            t = clock.now() - switched
            times.append((previous + t) / 2.0)  # the middle of the reading's integration
            previous = t
            cooling.append(v)
        rb.set_output(False)
        # how much the reference point warmed while the part heated (JEDEC's dTX, subtracted from the rise); a
        # sensor typed in by hand is not asked again (the block is held by the operator's controller)
        reference_rise = 0.0
        if not thermal.manual_sensor:
            after_k = thermal.read_k()
            log.add("sensor", temperature_k=after_k, after_heating=True)
            reference_rise = after_k - back.temperature_k
    finally:
        rb.safe_off()
        bench.safe_off()
        restore_fixture(thermal, start_k, log)
    sigma_v = max(v_cold_err, v_hot_err) * math.sqrt(plan.calibration_readings)
    return {"cal_temps_k": [reference.temperature_k, hot.temperature_k], "cal_volts": [v_cold, v_hot],
            "cal_sigma_v": sigma_v / math.sqrt(plan.calibration_readings),
            "cal_sigma_k": max(reference.sigma_k, hot.sigma_k), "cold_v": v_cold2, "cooling_t_s": times,
            "cooling_v": cooling, "power_w": power_w, "heating_current_a": i_heat, "heating_s": heated_s,
            "reference_k": back.temperature_k, "v_heat_cold": v_heat_cold, "v_heat_dc": trace[-1],
            "dvdt_heat": dvdt_heat, "notes": notes, "reference_rise_k": reference_rise}
