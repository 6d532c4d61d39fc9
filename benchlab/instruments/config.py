"""Bench configuration: what is on the desk, how it is wired, and the safety limits.

One TOML file describes a bench (see ``docs/bench-config.md``). These dataclasses are the
parsed, validated form; the loader in this module (``load_bench_config``) turns a file into
them with one clear :class:`benchlab.errors.ConfigError` per problem, before anything is
connected or powered.
"""

from __future__ import annotations

from dataclasses import dataclass, field

FIXTURES = ("resistor", "smu")


@dataclass(frozen=True)
class SafetyLimits:
    """Hard limits no setpoint may exceed (checked before anything is applied)."""

    max_supply_v: float  # largest supply / SMU voltage setpoint (V)
    max_drain_a: float  # largest current through the part (A); also the current limit / compliance
    max_power_w: float  # largest power in the part (W)


@dataclass(frozen=True)
class InstrumentSpec:
    """One instrument on the bench: its VISA resource string and the profile that drives it."""

    role: str  # "supply", "meter" or "source_meter"
    resource: str
    profile: str  # profile name (file stem in a drivers directory) or a path
    timeout_ms: int = 2000
    reset_on_connect: bool = False


@dataclass(frozen=True)
class BenchConfig:
    """A whole bench.

    ``fixture`` is ``"resistor"`` (supply -> series resistor -> diode-connected part -> 0 V,
    meter across the part) or ``"smu"`` (source-measure unit straight across the part).
    """

    fixture: str
    instruments: dict[str, InstrumentSpec]
    limits: SafetyLimits
    series_resistor_ohm: float = 0.0  # measured value (resistor fixture)
    series_resistor_tolerance: float = 0.01  # relative (0.01 = 1 %)
    settle_s: float = 0.05
    nplc: float = 1.0
    visa_library: str = "@py"
    source_path: str | None = None  # file it was read from (None: built in)
    notes: dict[str, str] = field(default_factory=dict)
