"""Plans of the thermal measurements: temperature coefficients (sweeps at several fixture temperatures) and
thermal resistance by the electrical method. Plain data, validated against the bench before anything is
connected or powered.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

from benchlab.errors import InputError, SafetyError
from benchlab.sweep.plan import SweepPlan

PACKAGE_RTH_K_PER_W = 62.0  # free-standing TO-220-like package, junction to ambient (from memory): the assumption
# used to predict the junction temperature of a heating step before the part's own Rth is known


@dataclass(frozen=True)
class TempcoPlan:
    """Sweep one part at each fixture temperature (pulsed, so the junction stays at the fixture's temperature).

    Parameters
    ----------
    temperatures_k : tuple of float
        Fixture setpoints (K), at least two, at least 5 K apart; each at or below ``max_fixture_k``.
    sweep : SweepPlan
        The sweep taken at every temperature.
    model : str
        Drain-current model of the fits (``auto``: chosen on the coldest sweep).
    bootstrap : int
        Resamples for the standard errors.
    """

    temperatures_k: tuple[float, ...]
    sweep: SweepPlan
    model: str = "auto"
    bootstrap: int = 100

    def to_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["sweep"] = self.sweep.to_dict()
        data["temperatures_k"] = list(self.temperatures_k)
        return data


@dataclass(frozen=True)
class RthPlan:
    """Thermal resistance of the part in the fixture by the electrical method (JEDEC JESD51-1).

    Parameters
    ----------
    sense_current_a : float
        Small forced current at which VGS is the temperature-sensitive parameter (A).
    heating_power_w : float or None
        Heating power (W); None takes the bench's ``thermal.max_heating_w``.
    calibration_rise_k : float
        The K-factor is calibrated at the reference temperature and this much above it (K).
    min_heating_s : float
        Heat at least this long before looking for steady state (s).
    check_interval_s : float
        Interval of the steady-state check during heating (s).
    steady_v : float
        Heating is steady when VGS moves less than this over two successive intervals (V).
    cooling_readings : int
        Readings after the switch to the sense current, extrapolated back to the switch (>= 3).
    calibration_readings : int
        Readings averaged per calibration point.
    heatsink_k_per_w : float
        Heat sink between the part and the sensed reference during the measurement (K/W, subtracted).
    nplc : float
        Integration time of every reading.
    off_s : float
        Pause with the output off after each pulsed reading (s).
    """

    sense_current_a: float = 1e-3
    heating_power_w: float | None = None
    calibration_rise_k: float = 40.0
    min_heating_s: float = 60.0
    check_interval_s: float = 10.0
    steady_v: float = 0.3e-3
    cooling_readings: int = 6
    calibration_readings: int = 8
    heatsink_k_per_w: float = 0.0
    nplc: float = 1.0
    off_s: float = 1.0

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def _finite_positive(name: str, value: float) -> None:
    if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be a positive number, got {value!r}")


def validate_tempco_plan(plan: TempcoPlan, thermal: Any) -> TempcoPlan:
    """Check the temperatures against each other and the bench's ``[thermal]`` limits.

    Raises
    ------
    InputError
        Fewer than two temperatures, too close together, not finite.
    SafetyError
        A temperature above ``thermal.max_fixture_k``.
    """
    temps = plan.temperatures_k
    if len(temps) < 2:
        raise InputError("give at least two fixture temperatures, e.g. --temps 25,60 (degC)")
    for t in temps:
        _finite_positive("a fixture temperature (K)", t)
        if t > thermal.max_fixture_k:
            raise SafetyError(f"fixture temperature {t - 273.15:.1f} degC ({t:.2f} K) is above the bench limit "
                              f"thermal.max_fixture_k {thermal.max_fixture_k - 273.15:.1f} degC")
    if max(temps) - min(temps) < 5.0:
        raise InputError("the fixture temperatures must span at least 5 K for a meaningful coefficient")
    if len(set(round(t, 3) for t in temps)) != len(temps):
        raise InputError("each fixture temperature once, please")
    if plan.bootstrap < 0 or plan.bootstrap == 1:
        raise InputError("bootstrap must be 0 or at least 2 resamples")
    return plan


def validate_rth_plan(plan: RthPlan, thermal: Any, limits: Any) -> RthPlan:
    """Check an Rth plan against the bench's limits (power, current, time).

    Raises
    ------
    InputError
        A value that makes no sense.
    SafetyError
        A heating power above ``thermal.max_heating_w`` or ``limits.max_power_w``, a sense current above
        ``limits.max_drain_a``.
    """
    for name in ("sense_current_a", "calibration_rise_k", "min_heating_s", "check_interval_s", "steady_v", "nplc",
                 "off_s"):
        _finite_positive(name, getattr(plan, name))
    if plan.heating_power_w is not None:
        _finite_positive("heating power (W)", plan.heating_power_w)
        if plan.heating_power_w > min(thermal.max_heating_w, limits.max_power_w):
            raise SafetyError(f"heating power {plan.heating_power_w:g} W is above the bench limit "
                              f"(thermal.max_heating_w {thermal.max_heating_w:g} W, limits.max_power_w "
                              f"{limits.max_power_w:g} W)")
    if plan.sense_current_a > limits.max_drain_a:
        raise SafetyError(f"sense current {plan.sense_current_a:g} A is above limits.max_drain_a")
    if plan.sense_current_a > 0.02:
        raise InputError("the sense current must be small (at most 20 mA) so that it does not heat the part")
    if not (math.isfinite(plan.heatsink_k_per_w) and plan.heatsink_k_per_w >= 0):
        raise InputError(f"the heat-sink figure must be >= 0 K/W, got {plan.heatsink_k_per_w!r}")
    if plan.cooling_readings < 3 or plan.calibration_readings < 2:
        raise InputError("at least 3 cooling readings and 2 readings per calibration point")
    if plan.min_heating_s > thermal.max_heating_s:
        raise SafetyError(f"min_heating_s {plan.min_heating_s:g} s is above thermal.max_heating_s "
                          f"{thermal.max_heating_s:g} s")
    return plan


__all__ = ["PACKAGE_RTH_K_PER_W", "RthPlan", "TempcoPlan", "validate_rth_plan", "validate_tempco_plan"]
