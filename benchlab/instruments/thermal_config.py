"""The ``[thermal]`` table of a bench file: the fixture temperature sensor, how the fixture is heated, the limits.

Thermal measurements (``benchlab thermal``) need to know the temperature of the block or chamber the part
sits on, a way to set it, and limits no thermal run may pass. Format in ``docs/bench-config.md``::

    [thermal]
    max_fixture_k = 358.15      # refuse to start, or to set the fixture, above this (K)
    max_junction_k = 398.15     # refuse a heating step whose predicted junction temperature is above this (K)
    max_heating_w = 1.0         # largest heating power of the thermal-resistance measurement (W)
    max_heating_s = 900         # longest heating (s)
    settle_band_k = 0.1         # settled: the sensor stays within this band ...
    settle_window_s = 60        # ... over this window ...
    settle_timeout_s = 1800     # ... found within this time, else the run stops
    poll_s = 5                  # sensor reading interval while waiting

    [thermal.sensor]            # kind = "scpi" (a thermometer), "meter" (a resistance reading + conversion), "manual"
    kind = "meter"
    resource = "TCPIP0::192.0.2.23::5025::SOCKET"
    query = "MEAS:RES?"
    conversion = "ntc"          # "ntc" (B-parameter: r_ref_ohm at t_ref_k, beta_k) or "rtd" (IEC 60751, r_ref_ohm = R0)
    r_ref_ohm = 10000
    t_ref_k = 298.15
    beta_k = 3950

    [thermal.control]           # kind = "manual" (the operator sets it) or "scpi" (a command with {kelvin}/{celsius})
    kind = "manual"
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

from benchlab.units import parse_quantity
from benchlab.instruments.transport import resource_kind
from benchlab.errors import ConfigError

SENSOR_KINDS = ("scpi", "meter", "manual")
CONVERSIONS = ("ntc", "rtd")
CONTROL_KINDS = ("manual", "scpi")
CELSIUS_OFFSET_K = 273.15


@dataclass(frozen=True)
class SensorSpec:
    """Where the fixture temperature comes from."""

    kind: str  # scpi, meter or manual
    resource: str = ""
    query: str = ""
    unit: str = "K"  # scpi thermometer replies in K or C
    conversion: str = ""  # meter: ntc or rtd
    r_ref_ohm: float = 0.0
    t_ref_k: float = 298.15
    beta_k: float = 0.0
    timeout_ms: int = 2000


@dataclass(frozen=True)
class ControlSpec:
    """How the fixture temperature is set: by the operator, or by one SCPI command."""

    kind: str = "manual"
    resource: str = ""
    command: str = ""  # e.g. "SOUR:TEMP {celsius:.2f}" (written by the user for their controller)
    timeout_ms: int = 2000


@dataclass(frozen=True)
class ThermalConfig:
    """The ``[thermal]`` table, validated (temperatures in K, SI units)."""

    sensor: SensorSpec
    control: ControlSpec
    max_fixture_k: float
    max_junction_k: float = 398.15
    max_heating_w: float = 1.0
    max_heating_s: float = 900.0
    settle_band_k: float = 0.1
    settle_window_s: float = 60.0
    settle_timeout_s: float = 1800.0
    poll_s: float = 5.0

    def settle_criterion(self) -> str:
        """The settling rule in words (stated with every result)."""
        return (f"settled when {self.settle_window_s:g} s of sensor readings every {self.poll_s:g} s stay within "
                f"{self.settle_band_k:g} K and within {self.settle_band_k:g} K of the setpoint (give up after "
                f"{self.settle_timeout_s:g} s)")


_TOP = {"max_fixture_k", "max_junction_k", "max_heating_w", "max_heating_s", "settle_band_k", "settle_window_s",
        "settle_timeout_s", "poll_s", "sensor", "control"}
_UNITS = {"max_fixture_k": "K", "max_junction_k": "K", "max_heating_w": "W", "max_heating_s": "s",
          "settle_band_k": "K", "settle_window_s": "s", "settle_timeout_s": "s", "poll_s": "s"}
_SENSOR_KEYS = {"kind", "resource", "query", "unit", "conversion", "r_ref_ohm", "t_ref_k", "beta_k", "timeout_ms"}
_CONTROL_KEYS = {"kind", "resource", "command", "timeout_ms"}


def _number(table: Mapping[str, Any], key: str, unit: str, fail, default: float | None = None) -> float:
    if key not in table:
        if default is None:
            raise fail(key, "missing")
        return default
    value = table[key]
    try:
        number = _kelvin(value) if unit == "K" else parse_quantity(value, unit)
    except ValueError as exc:
        raise fail(key, str(exc)) from None
    if not (math.isfinite(number) and number > 0):
        raise fail(key, f"must be above 0, got {number:g}")
    return number


def _kelvin(value: object) -> float:
    if isinstance(value, str) and value.strip().endswith("K"):
        return float(value.strip()[:-1])
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"must be a temperature in kelvin (a number or text like '358.15 K'), got {value!r}")
    return float(value)


def _resource(table: Mapping[str, Any], where: str, fail) -> str:
    text = table.get("resource")
    if not isinstance(text, str) or not text.strip():
        raise fail(f"{where}.resource", "missing (a VISA resource string)")
    try:
        resource_kind(text.strip())
    except ConfigError as exc:
        raise fail(f"{where}.resource", str(exc).split(": ", 1)[-1]) from None
    return text.strip()


def _timeout(table: Mapping[str, Any], where: str, fail) -> int:
    timeout = table.get("timeout_ms", 2000)
    if type(timeout) is not int or timeout <= 0:
        raise fail(f"{where}.timeout_ms", f"must be a positive whole number of milliseconds, got {timeout!r}")
    return timeout


def _only(table: Mapping[str, Any], allowed: set[str], where: str, fail) -> None:
    for key in table:
        if key not in allowed:
            raise fail(f"{where}.{key}", f"unknown key (known here: {', '.join(sorted(allowed))})")


def _parse_sensor(table: Any, fail) -> SensorSpec:
    where = "thermal.sensor"
    if not isinstance(table, dict):
        raise fail(where, "missing table (kind = \"scpi\", \"meter\" or \"manual\")")
    _only(table, _SENSOR_KEYS, where, fail)
    kind = table.get("kind")
    if kind not in SENSOR_KINDS:
        raise fail(f"{where}.kind", f"must be one of {', '.join(SENSOR_KINDS)}, got {kind!r}")
    if kind == "manual":
        return SensorSpec(kind="manual")
    query = table.get("query")
    if not isinstance(query, str) or not query.strip().endswith("?"):
        raise fail(f"{where}.query", "missing or not a query (it must end in '?')")
    spec = {"kind": kind, "resource": _resource(table, where, fail), "query": query.strip(),
            "timeout_ms": _timeout(table, where, fail)}
    if kind == "scpi":
        unit = table.get("unit", "K")
        if unit not in ("K", "C"):
            raise fail(f"{where}.unit", f"must be \"K\" or \"C\" (what the thermometer replies in), got {unit!r}")
        return SensorSpec(unit=unit, **spec)
    conversion = table.get("conversion")
    if conversion not in CONVERSIONS:
        raise fail(f"{where}.conversion", f"must be one of {', '.join(CONVERSIONS)}, got {conversion!r}")

    def sub_fail(key, problem):
        return fail(f"{where}.{key}", problem)

    r_ref = _number(table, "r_ref_ohm", "ohm", sub_fail)
    if conversion == "ntc":
        return SensorSpec(conversion="ntc", r_ref_ohm=r_ref, t_ref_k=_number(table, "t_ref_k", "K", sub_fail, 298.15),
                          beta_k=_number(table, "beta_k", "K", sub_fail), **spec)
    return SensorSpec(conversion="rtd", r_ref_ohm=r_ref, **spec)


def _parse_control(table: Any, fail) -> ControlSpec:
    where = "thermal.control"
    if table is None:
        return ControlSpec()
    if not isinstance(table, dict):
        raise fail(where, "must be a table")
    _only(table, _CONTROL_KEYS, where, fail)
    kind = table.get("kind", "manual")
    if kind not in CONTROL_KINDS:
        raise fail(f"{where}.kind", f"must be one of {', '.join(CONTROL_KINDS)}, got {kind!r}")
    if kind == "manual":
        return ControlSpec()
    command = table.get("command")
    if not isinstance(command, str) or not ("{kelvin" in command or "{celsius" in command):
        raise fail(f"{where}.command", "missing, or without a {kelvin} or {celsius} placeholder")
    try:
        command.format(kelvin=300.0, celsius=27.0)
    except (KeyError, IndexError, ValueError) as exc:
        raise fail(f"{where}.command", f"bad placeholder: {exc}") from None
    return ControlSpec(kind="scpi", resource=_resource(table, where, fail), command=command.strip(),
                       timeout_ms=_timeout(table, where, fail))


def parse_thermal(table: Any, fail, max_power_w: float) -> ThermalConfig:
    """Validate the ``[thermal]`` table; ``fail(key, problem)`` builds the :class:`ConfigError` to raise.

    Raises
    ------
    ConfigError
        An unknown or missing key, a value in the wrong unit, a heating power above the bench's
        ``limits.max_power_w``, a junction limit below the fixture limit.
    """
    if not isinstance(table, dict):
        raise fail("thermal", "must be a table")
    _only(table, _TOP, "thermal", fail)

    def top_fail(key, problem):
        return fail(f"thermal.{key}", problem)

    values = {key: _number(table, key, unit, top_fail, default=None if key == "max_fixture_k" else
                           ThermalConfig.__dataclass_fields__[key].default) for key, unit in _UNITS.items()}
    if values["max_heating_w"] > max_power_w:
        raise top_fail("max_heating_w", f"{values['max_heating_w']:g} W is above limits.max_power_w "
                                        f"{max_power_w:g} W")
    if values["max_junction_k"] < values["max_fixture_k"]:
        raise top_fail("max_junction_k", "must not be below max_fixture_k (the junction is never cooler than "
                                         "the fixture it sits on)")
    if values["settle_window_s"] < values["poll_s"]:
        raise top_fail("settle_window_s", "must be at least poll_s (two readings per window)")
    return ThermalConfig(sensor=_parse_sensor(table.get("sensor"), fail), control=_parse_control(
        table.get("control"), fail), **values)


def simulator_thermal_config(resource: str) -> ThermalConfig:
    """The thermal setup of the built-in simulator: its block thermistor read through ``resource``.

    The sensor is read as a resistance and converted (the "meter channel + conversion" path) and the
    block is set by the simulator's own ``SIMulation:FIXTure:TEMPerature`` command (see docs/scpi.md).
    Limits are invented for the demo bag: fixture up to 373.15 K, junction up to 423.15 K, 1.5 W, 900 s.
    """
    return ThermalConfig(
        sensor=SensorSpec(kind="meter", resource=resource, query="SIM:FIXT:SENS:RES?", conversion="ntc",
                          r_ref_ohm=10_000.0, t_ref_k=298.15, beta_k=3950.0),
        control=ControlSpec(kind="scpi", resource=resource, command="SIM:FIXT:TEMP {kelvin:.3f}"),
        max_fixture_k=373.15, max_junction_k=423.15, max_heating_w=1.5, max_heating_s=900.0,
        settle_band_k=0.05, settle_window_s=30.0, settle_timeout_s=3600.0, poll_s=5.0)
