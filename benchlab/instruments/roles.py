"""The three instrument roles as small interfaces (the contract the sweep engine codes against).

Concrete classes in this package implement them over a transport and a profile;
tests may implement them with in-memory fakes. Readings are floats in SI units;
the SCPI special values 9.9E37 / -9.9E37 / 9.91E37 arrive as +inf / -inf / nan,
never as numbers. No method here imports or exposes pyvisa.
"""

from __future__ import annotations

from typing import Protocol, Sequence, runtime_checkable


@runtime_checkable
class Supply(Protocol):
    """A one-channel programmable DC supply."""

    identity: str  # the *IDN? reply
    resource: str

    def set_current_limit(self, amps: float) -> None: ...
    def set_voltage(self, volts: float) -> None: ...
    def set_output(self, on: bool) -> None: ...
    def output_is_on(self) -> bool: ...
    def measure_voltage(self) -> float: ...
    def measure_current(self) -> float: ...
    def close(self) -> None: ...


@runtime_checkable
class Meter(Protocol):
    """A DC multimeter."""

    identity: str
    resource: str

    def configure_voltage(self, range_volts: float | None = None, nplc: float = 1.0) -> None:
        """Select DC volts; ``None`` range means autorange."""

    def configure_current(self, range_amps: float | None = None, nplc: float = 1.0) -> None: ...
    def read(self) -> float: ...
    def close(self) -> None: ...


@runtime_checkable
class SourceMeasureUnit(Protocol):
    """A source-measure unit: force voltage or current with compliance, measure both."""

    identity: str
    resource: str

    def configure_source(self, mode: str, compliance: float) -> None:
        """``mode`` is ``"voltage"`` (compliance in A) or ``"current"`` (compliance in V)."""

    def set_level(self, value: float) -> None: ...
    def set_nplc(self, nplc: float) -> None: ...
    def set_output(self, on: bool) -> None: ...
    def output_is_on(self) -> bool: ...
    def measure(self) -> tuple[float, float]:
        """One reading: (volts, amps)."""

    def in_compliance(self) -> bool:
        """True when the last reading hit the compliance limit."""

    def run_list(self, levels: Sequence[float], dwell_s: float) -> list[tuple[float, float]]:
        """Upload a list of setpoints, trigger once, read the buffer back in one transfer."""

    def close(self) -> None: ...
