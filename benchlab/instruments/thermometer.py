"""Reading the fixture temperature and setting it: the sensor and control of a bench's ``[thermal]`` table.

A :class:`FixtureThermal` holds the sensor (an SCPI thermometer, a meter reading a thermistor or RTD
through its conversion, or the operator typing the value) and the control (an SCPI command, or the
operator). Conversions:

- NTC thermistor, B-parameter equation: 1/T = 1/T0 + ln(R/R0)/B (common practice; thermistor catalogues).
- Platinum RTD above 0 degC, IEC 60751 (Callendar-Van Dusen): R = R0 (1 + A t + B t^2), A = 3.9083e-3 /degC,
  B = -5.775e-7 /degC^2, t in degC.
"""

from __future__ import annotations

import math
from typing import Any, Callable

from benchlab.errors import InputError, InstrumentError
from benchlab.instruments.thermal_config import CELSIUS_OFFSET_K, ThermalConfig
from benchlab.instruments.transport import Transport, VisaTransport

RTD_A = 3.9083e-3  # IEC 60751
RTD_B = -5.775e-7  # IEC 60751


def ntc_temperature_k(ohms: float, r_ref_ohm: float, t_ref_k: float, beta_k: float) -> float:
    """Temperature (K) of an NTC thermistor reading ``ohms`` (B-parameter equation)."""
    if not ohms > 0:
        raise InstrumentError(f"thermistor reading {ohms!r} ohm is not a resistance (open or shorted sensor?)")
    return 1.0 / (1.0 / t_ref_k + math.log(ohms / r_ref_ohm) / beta_k)


def rtd_temperature_k(ohms: float, r0_ohm: float) -> float:
    """Temperature (K) of a platinum RTD reading ``ohms`` (IEC 60751, 0 degC and above)."""
    ratio = ohms / r0_ohm
    if not 0.5 < ratio < 4.0:
        raise InstrumentError(f"RTD reading {ohms!r} ohm is outside its range (open or shorted sensor?)")
    # solve B t^2 + A t + (1 - ratio) = 0 for the root near A t = ratio - 1
    t_c = (-RTD_A + math.sqrt(RTD_A * RTD_A - 4.0 * RTD_B * (1.0 - ratio))) / (2.0 * RTD_B)
    return t_c + CELSIUS_OFFSET_K


def rtd_ohm(temperature_k: float, r0_ohm: float) -> float:
    """Resistance of a platinum RTD at ``temperature_k`` (IEC 60751, 0 degC and above)."""
    t_c = temperature_k - CELSIUS_OFFSET_K
    return r0_ohm * (1.0 + RTD_A * t_c + RTD_B * t_c * t_c)


class FixtureThermal:
    """The fixture's temperature sensor and control.

    Parameters
    ----------
    config : ThermalConfig
        The bench's ``[thermal]`` table.
    transports : mapping
        Resource -> open :class:`Transport` for the scpi sensor / control (one per resource).
    ask : callable, optional
        Prompt for the operator (manual sensor or control); default ``input``.
    say : callable, optional
        Message to the operator; default ``print``.
    """

    def __init__(self, config: ThermalConfig, transports: dict[str, Transport],
                 ask: Callable[[str], str] | None = None, say: Callable[[str], None] | None = None):
        self.config = config
        self.transports = transports
        self.ask = ask or (lambda prompt: input(prompt))
        self.say = say or (lambda text: print(text))
        self.setpoint_k: float | None = None

    @property
    def manual_sensor(self) -> bool:
        """True when the operator types the temperature in."""
        return self.config.sensor.kind == "manual"

    def read_k(self) -> float:
        """One reading of the fixture temperature (K)."""
        sensor = self.config.sensor
        if sensor.kind == "manual":
            while True:
                text = self.ask("Fixture temperature now, in degC (when it is steady): ").strip()
                try:
                    value = float(text) + CELSIUS_OFFSET_K
                except ValueError:
                    self.say(f"'{text}' is not a number of degC")
                    continue
                if math.isfinite(value) and value > 0:
                    return value
                self.say(f"'{text}' is not a temperature")
        reply = self.transports[sensor.resource].query(sensor.query)
        try:
            value = float(reply.strip().split(",")[0])
        except ValueError:
            raise InstrumentError(f"temperature sensor replied {reply.strip()[:40]!r}, not a number",
                                  resource=sensor.resource) from None
        if sensor.kind == "scpi":
            kelvin = value + (CELSIUS_OFFSET_K if sensor.unit == "C" else 0.0)
        elif sensor.conversion == "ntc":
            kelvin = ntc_temperature_k(value, sensor.r_ref_ohm, sensor.t_ref_k, sensor.beta_k)
        else:
            kelvin = rtd_temperature_k(value, sensor.r_ref_ohm)
        if not (math.isfinite(kelvin) and 150.0 < kelvin < 700.0):
            raise InstrumentError(f"temperature sensor reads {kelvin:.1f} K: check the sensor and its wiring",
                                  resource=sensor.resource)
        return kelvin

    def set_k(self, kelvin: float) -> None:
        """Set the fixture to ``kelvin`` (refused above the bench's ``max_fixture_k``)."""
        if not (math.isfinite(kelvin) and 0 < kelvin <= self.config.max_fixture_k * (1 + 1e-12)):
            raise InputError(f"fixture temperature {kelvin:.2f} K is above the bench limit thermal.max_fixture_k "
                             f"{self.config.max_fixture_k:.2f} K")
        control = self.config.control
        self.setpoint_k = kelvin
        if control.kind == "manual":
            self.say(f"Set the fixture to {kelvin - CELSIUS_OFFSET_K:.1f} degC ({kelvin:.2f} K); benchlab waits for "
                     f"the sensor to settle.")
            return
        self.transports[control.resource].write(control.command.format(kelvin=kelvin,
                                                                       celsius=kelvin - CELSIUS_OFFSET_K))

    def close(self) -> None:
        """Close the transports this object opened."""
        for transport in self.transports.values():
            transport.close()


def open_fixture_thermal(config: ThermalConfig, resource_manager: Any = None, *,
                         transport_factory: Callable[[str, int], Transport] | None = None,
                         ask: Callable[[str], str] | None = None,
                         say: Callable[[str], None] | None = None) -> FixtureThermal:
    """Open the sensor's and control's resources (each once) and return a :class:`FixtureThermal`.

    Raises
    ------
    InstrumentError
        A resource that cannot be opened (every one opened so far is closed again).
    """
    wanted: dict[str, int] = {}
    for spec in (config.sensor, config.control):
        if spec.kind == "scpi" or getattr(spec, "kind", "") == "meter":
            wanted[spec.resource] = max(wanted.get(spec.resource, 0), spec.timeout_ms)
    if transport_factory is None:
        from benchlab.instruments.bench import make_resource_manager

        manager = resource_manager if resource_manager is not None else make_resource_manager()

        def transport_factory(resource: str, timeout_ms: int) -> Transport:
            return VisaTransport(manager, resource, timeout_ms=timeout_ms).open()

    transports: dict[str, Transport] = {}
    try:
        for resource, timeout in wanted.items():
            transports[resource] = transport_factory(resource, timeout)
    except BaseException:
        for transport in transports.values():
            transport.close()
        raise
    return FixtureThermal(config, transports, ask, say)


class RealClock:
    """Wall-clock time for a real bench (``now`` in s, ``wait`` sleeps)."""

    def now(self) -> float:
        import time

        return time.monotonic()

    def wait(self, seconds: float) -> None:
        import time

        if seconds > 0:
            time.sleep(seconds)


class SimClock:
    """The built-in simulator's virtual time, read and advanced through its own ``SIMulation:CLOCk`` commands.

    Waiting on the simulator costs no real time at time scale 0, so a thermal run of many minutes of
    instrument time finishes in seconds; the simulated part heats and cools on the same clock.
    """

    MAX_STEP_S = 3600.0  # the simulator's largest single advance

    def __init__(self, transport: Transport):
        self.transport = transport

    def now(self) -> float:
        return float(self.transport.query("SIMulation:CLOCk?"))

    def wait(self, seconds: float) -> None:
        while seconds > 0:
            step = min(seconds, self.MAX_STEP_S)
            self.transport.query(f"SIMulation:CLOCk:ADVance {step:.6f};*OPC?")
            seconds -= step
