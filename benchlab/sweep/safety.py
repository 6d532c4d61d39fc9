"""The safety guard: wraps the source instruments and refuses anything that breaks a limit.

The sweep engine never talks to a supply or source-measure unit directly; it goes through
:class:`GuardedSupply` or :class:`GuardedSmu`, which enforce, before anything is sent:

- the current limit / compliance is set (and within ``max_drain_a``) before the output may be enabled;
- no voltage setpoint beyond ``max_supply_v`` and no current setpoint beyond ``max_drain_a``;
- the predicted drain current and power in the part are within limits; when the caller gives no
  prediction the worst case is used (resistor fixture: the most a part on the resistor line can take,
  bounded by the supply current limit; SMU: setpoint x compliance);
- :meth:`safe_off` switches the output off first, then returns the setpoint to 0, and never raises.

The guard also keeps count of how long the output was on (``powered_s``).
"""

from __future__ import annotations

import math
import time
from typing import Callable, Sequence

from benchlab.errors import SafetyError
from benchlab.sweep.plan import Limits, line_worst_power

_SLACK = 1e-9  # relative slack on comparisons so a setpoint exactly at a limit is allowed


def _within(value: float, limit: float) -> bool:
    return value <= limit * (1.0 + _SLACK)

# Times safe_off sends the output-off command before it reports that it failed.
OFF_ATTEMPTS = 3


class _PoweredClock:
    """Accumulates the time the output was on."""

    def __init__(self, clock: Callable[[], float]):
        self._clock = clock
        self._since: float | None = None
        self.total_s = 0.0

    def on(self) -> None:
        if self._since is None:
            self._since = self._clock()

    def off(self) -> None:
        if self._since is not None:
            self.total_s += self._clock() - self._since
            self._since = None

    def value(self) -> float:
        extra = self._clock() - self._since if self._since is not None else 0.0
        return self.total_s + extra


def _check_number(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value < 0:
        raise SafetyError(f"refused {name} {value!r}: must be a finite number >= 0")
    return value


class _GuardedOutput:
    """What both guards share: output switching that needs the limit first, powered time, safe off."""

    _what = "output"  # words for messages
    _limit_words = "the limit"

    def __init__(self, inner, limits: Limits, clock: Callable[[], float]):
        self.inner = inner
        self.limits = limits
        self._output_on = False
        self._powered = _PoweredClock(clock)

    @property
    def powered_s(self) -> float:
        return self._powered.value()

    def _limit_is_set(self) -> bool:
        raise NotImplementedError

    def _zero_setpoint(self) -> None:
        raise NotImplementedError

    def set_output(self, on: bool) -> None:
        if on:
            if not self._limit_is_set():
                raise SafetyError(f"refused to switch the output on: {self._limit_words} is not set")
            # the setpoint was checked when it was applied (with its prediction); nothing else sets it
            self.inner.set_output(True)
            self._output_on = True
            self._powered.on()
        else:
            self.inner.set_output(False)
            self._output_on = False
            self._powered.off()

    def output_is_on(self) -> bool:
        return self.inner.output_is_on()

    def confirm(self) -> None:
        """Read the instrument's error queue for a setpoint whose check it deferred (pipelining profiles); a
        refused setpoint raises here, before the point that followed it is stored or another setpoint sent."""
        confirm = getattr(self.inner, "confirm", None)
        if confirm is not None:
            confirm()

    def safe_off(self) -> list[str]:
        """Output off, then setpoint to 0. Never raises; returns the problems met (empty when clean)."""
        problems = []
        failures = []
        for _ in range(OFF_ATTEMPTS):  # a refused or lost OUTP OFF is sent again: off matters more than time
            try:
                self.inner.set_output(False)
                break
            except BaseException as exc:  # noqa: BLE001 - must not mask the original exit
                failures.append(exc)
        else:
            problems.append(f"switching the {self._what} output off failed: {failures[-1]} "
                            f"({OFF_ATTEMPTS} attempts)")
        self._output_on = False
        self._powered.off()
        try:
            self._zero_setpoint()
        except BaseException as exc:  # noqa: BLE001
            problems.append(f"returning the {self._what} setpoint to 0 failed: {exc}")
        return problems


class GuardedSupply(_GuardedOutput):
    """A :class:`benchlab.instruments.roles.Supply` behind the safety limits (resistor fixture).

    Parameters
    ----------
    supply : Supply
        The real (or fake) supply.
    limits : Limits
        The bench's hard limits.
    series_resistor_ohm : float
        The series resistor between supply and part (for the worst-case current and power).
    clock : callable
        Monotonic clock (injected for tests).
    """

    _what = "supply"
    _limit_words = "the current limit"

    def __init__(self, supply, limits: Limits, series_resistor_ohm: float,
                 clock: Callable[[], float] = time.monotonic):
        super().__init__(supply, limits, clock)
        self.resistor_ohm = float(series_resistor_ohm)
        self.current_limit_a: float | None = None
        self.setpoint_v = 0.0

    def _limit_is_set(self) -> bool:
        return self.current_limit_a is not None

    def _zero_setpoint(self) -> None:
        self.inner.set_voltage(0.0)
        self.confirm()
        self.setpoint_v = 0.0

    def set_current_limit(self, amps: float) -> None:
        amps = _check_number("current limit", amps)
        if amps <= 0 or not _within(amps, self.limits.max_drain_a):
            raise SafetyError(f"refused current limit {amps:g} A: must be > 0 and <= max_drain_a "
                              f"{self.limits.max_drain_a:g} A")
        self.inner.set_current_limit(amps)
        self.current_limit_a = amps

    def check_voltage(self, volts: float, expect_id: float | None = None, expect_vgs: float | None = None) -> float:
        """Raise :class:`SafetyError` unless ``volts`` may be applied; return it as a float."""
        volts = _check_number("supply voltage", volts)
        lim = self.limits
        if not _within(volts, lim.max_supply_v):
            raise SafetyError(f"refused supply voltage {volts:g} V: above max_supply_v {lim.max_supply_v:g} V")
        if volts > 0 and self.current_limit_a is None:
            raise SafetyError("refused supply voltage: the current limit is not set yet")
        if expect_id is not None:
            if not _within(expect_id, lim.max_drain_a):
                raise SafetyError(f"refused supply voltage {volts:g} V: predicted drain current {expect_id:g} A "
                                  f"is above max_drain_a {lim.max_drain_a:g} A")
            vgs = min(volts, expect_vgs if expect_vgs is not None else volts)
            if not _within(expect_id * vgs, lim.max_power_w):
                raise SafetyError(f"refused supply voltage {volts:g} V: predicted power in the part "
                                  f"{expect_id * vgs:.3g} W is above max_power_w {lim.max_power_w:g} W")
        elif volts > 0:
            worst = line_worst_power(volts, self.resistor_ohm, self.current_limit_a)
            if not _within(worst, lim.max_power_w):
                raise SafetyError(f"refused supply voltage {volts:g} V: up to {worst:.3g} W could land in the part "
                                  f"(limit {lim.max_power_w:g} W)")
        return volts

    def set_voltage(self, volts: float, expect_id: float | None = None, expect_vgs: float | None = None) -> None:
        """Apply a voltage setpoint after :meth:`check_voltage`."""
        volts = self.check_voltage(volts, expect_id, expect_vgs)
        self.inner.set_voltage(volts)
        self.setpoint_v = volts

    def measure_voltage(self) -> float:
        return self.inner.measure_voltage()

    def measure_current(self) -> float:
        return self.inner.measure_current()


class GuardedSmu(_GuardedOutput):
    """A :class:`benchlab.instruments.roles.SourceMeasureUnit` behind the safety limits (SMU fixture)."""

    _what = "source-measure unit"
    _limit_words = "the compliance"

    def __init__(self, smu, limits: Limits, clock: Callable[[], float] = time.monotonic):
        super().__init__(smu, limits, clock)
        self.mode: str | None = None
        self.compliance: float | None = None
        self.level = 0.0

    def _limit_is_set(self) -> bool:
        return self.compliance is not None

    def _zero_setpoint(self) -> None:
        self.inner.set_level(0.0)
        self.confirm()
        self.level = 0.0

    def configure_source(self, mode: str, compliance: float) -> None:
        """Select what to force and set the compliance; refused while the output is on."""
        self._check_source(mode, compliance)
        self.inner.configure_source(mode, compliance)
        self.mode, self.compliance, self.level = mode, compliance, 0.0

    def prepare(self, mode: str, compliance: float, nplc: float | None = None) -> None:
        """Compliance, mode, integration time (when given) and a level of 0, checked as :meth:`configure_source`;
        one batch with one error check where the instrument allows it (``prepare_source``), else one by one."""
        compliance = self._check_source(mode, compliance)
        prepare = getattr(self.inner, "prepare_source", None)
        if prepare is not None:
            prepare(mode, compliance, nplc)
        else:
            self.inner.configure_source(mode, compliance)
            if nplc is not None:
                self.inner.set_nplc(nplc)
            self.inner.set_level(0.0)
        self.mode, self.compliance, self.level = mode, compliance, 0.0

    def _check_source(self, mode: str, compliance: float) -> float:
        """Raise :class:`SafetyError` unless ``mode`` with ``compliance`` may be configured now."""
        compliance = _check_number("compliance", compliance)
        if self._output_on:
            raise SafetyError("refused to change the source mode while the output is on")
        if mode == "voltage":
            if compliance <= 0 or not _within(compliance, self.limits.max_drain_a):
                raise SafetyError(f"refused current compliance {compliance:g} A: must be > 0 and <= max_drain_a "
                                  f"{self.limits.max_drain_a:g} A")
        elif mode == "current":
            if compliance <= 0 or not _within(compliance, self.limits.max_supply_v):
                raise SafetyError(f"refused voltage compliance {compliance:g} V: must be > 0 and <= max_supply_v "
                                  f"{self.limits.max_supply_v:g} V")
        else:
            raise SafetyError(f"refused source mode '{mode}' (expected 'voltage' or 'current')")
        return compliance

    def check_level(self, value: float, expect_other: float | None = None) -> float:
        """Raise unless ``value`` may be forced. ``expect_other`` is the predicted current (forcing
        volts) or VGS (forcing amps); without it the worst case, the compliance, is assumed."""
        value = _check_number("source level", value)
        lim = self.limits
        if self.mode is None:
            if value > 0:
                raise SafetyError("refused source level: compliance not set yet")
            return value
        if self.mode == "voltage":
            if not _within(value, lim.max_supply_v):
                raise SafetyError(f"refused source voltage {value:g} V: above max_supply_v {lim.max_supply_v:g} V")
            current = self.compliance if expect_other is None else min(expect_other, self.compliance)
            power = value * current
        else:
            if not _within(value, lim.max_drain_a):
                raise SafetyError(f"refused source current {value:g} A: above max_drain_a {lim.max_drain_a:g} A")
            volts = self.compliance if expect_other is None else min(expect_other, self.compliance)
            power = value * volts
        if not _within(power, lim.max_power_w):
            what = "predicted" if expect_other is not None else "worst-case"
            raise SafetyError(f"refused source level {value:g}: {what} power in the part {power:.3g} W is above "
                              f"max_power_w {lim.max_power_w:g} W")
        return value

    def set_level(self, value: float, expect_other: float | None = None) -> None:
        value = self.check_level(value, expect_other)
        self.inner.set_level(value)
        self.level = value

    def set_nplc(self, nplc: float) -> None:
        self.inner.set_nplc(nplc)

    def measure(self) -> tuple[float, float]:
        return self.inner.measure()

    def in_compliance(self) -> bool:
        return self.inner.in_compliance()

    def run_list(self, levels: Sequence[float], dwell_s: float,
                 expect_other: Sequence[float] | None = None) -> list[tuple[float, float]]:
        """Check every level first, then run the list on the instrument (output must already be on)."""
        checked = [self.check_level(v, None if expect_other is None else expect_other[k])
                   for k, v in enumerate(levels)]
        if not self._output_on:
            raise SafetyError("refused to run a list with the output off")
        self._powered.on()
        result = self.inner.run_list(checked, dwell_s)
        if checked:
            self.level = checked[-1]
        return result
