"""Bench services: check a bench (identify, round-trip a harmless setting, read errors) and list profiles.

``check_bench`` never enables an output. With an output found already on, it leaves that
instrument's settings alone and reports it, because changing a setpoint under a live output is
exactly what a check must not do.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any, Callable

from benchlab.errors import BenchlabError, ConfigError
from benchlab.instruments.bench import Bench, TransportFactory, open_bench
from benchlab.instruments.config import BenchConfig, load_bench_config, simulator_bench_config
from benchlab.instruments.profiles import available_profiles, load_profile, profile_search_path
from benchlab.instruments.scpi_roles import ScpiInstrument, ScpiMeter, ScpiSmu, ScpiSupply

# Setpoints are sent with 6 significant digits; a readback within this is the same value.
_REL_TOLERANCE = 1e-5
_ABS_TOLERANCE = 1e-9


@dataclass(frozen=True)
class RoundTrip:
    """One setting sent and read back with the output off."""

    setting: str
    sent: float
    read_back: float | None  # None: the profile has no query for it
    ok: bool
    note: str = ""


@dataclass(frozen=True)
class InstrumentCheck:
    """What the check found for one instrument."""

    role: str
    resource: str
    profile: str
    identity: str
    output_was_on: bool | None  # None for a meter (no output)
    round_trips: tuple[RoundTrip, ...] = ()
    problems: tuple[str, ...] = ()  # each makes the check fail
    notes: tuple[str, ...] = ()  # worth knowing, not a failure

    @property
    def ok(self) -> bool:
        return not self.problems and all(trip.ok for trip in self.round_trips)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form."""
        data = asdict(self)
        data["ok"] = self.ok
        return data


@dataclass(frozen=True)
class BenchCheckReport:
    """The result of ``benchlab bench check``."""

    fixture: str
    source: str  # the bench file, or "built-in simulator bench"
    instruments: tuple[InstrumentCheck, ...] = field(default_factory=tuple)

    @property
    def ok(self) -> bool:
        return all(check.ok for check in self.instruments)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form."""
        return {"fixture": self.fixture, "source": self.source, "ok": self.ok,
                "instruments": [check.to_dict() for check in self.instruments]}


def check_bench(config: BenchConfig, resource_manager: Any = None, *,
                transport_factory: TransportFactory | None = None, source: str | None = None) -> BenchCheckReport:
    """Connect the bench, identify each instrument and round-trip a harmless setting, outputs off.

    Parameters
    ----------
    config : BenchConfig
        The bench to check.
    resource_manager, transport_factory
        Passed to :func:`benchlab.instruments.bench.open_bench`.
    source : str, optional
        What to call the bench in the report (default: its file).

    Returns
    -------
    BenchCheckReport
        One entry per instrument; ``ok`` is False when a readback differs, the instrument
        queued an error, or an output was found on.

    Raises
    ------
    InstrumentError
        When an instrument cannot be opened or does not answer ``*IDN?``.
    """
    with open_bench(config, resource_manager, transport_factory=transport_factory) as bench:
        checks = tuple(_check_instrument(bench, role, instrument)
                       for role, instrument in bench.instruments().items())
    return BenchCheckReport(fixture=config.fixture, source=source or config.source_path or "built-in bench",
                            instruments=checks)


def check_bench_file(path: str) -> BenchCheckReport:
    """Load a bench file and check it (see :func:`check_bench`)."""
    return check_bench(load_bench_config(path))


def check_simulator_bench(fixture: str = "resistor") -> BenchCheckReport:
    """Start the simulated bench in this process and check its built-in configuration."""
    from benchlab.sim import SimBench, SimConfig  # the simulator is only started on request

    with SimBench(SimConfig(fixture=fixture, time_scale=0.0)) as sim:
        sim.start(first_port=0)
        config = simulator_bench_config(sim.resources, fixture=fixture,
                                        series_resistor_ohm=sim.series_resistor_actual_ohm)
        return check_bench(config, source=f"built-in simulator bench ({fixture} fixture)")


def _check_instrument(bench: Bench, role: str, instrument: ScpiInstrument) -> InstrumentCheck:
    spec = bench.config.instruments[role]
    base = dict(role=role, resource=spec.resource, profile=instrument.profile.name,
                identity=bench.identities.get(role, ""))
    output_was_on: bool | None = None
    trips: list[RoundTrip] = []
    problems: list[str] = []
    notes = identity_notes(base["identity"])
    base["notes"] = tuple(notes)
    try:
        if isinstance(instrument, (ScpiSupply, ScpiSmu)):
            output_was_on = instrument.output_is_on()
            if output_was_on:
                problems.append("output is ON: settings left untouched; switch it off and check again")
                return InstrumentCheck(output_was_on=True, problems=tuple(problems), **base)
        trips.extend(_ROUND_TRIPS[role](instrument, bench.config))
        if output_was_on is False and instrument.output_is_on():  # type: ignore[union-attr]
            problems.append("output reads ON after the check although benchlab never enabled it")
        leftover = instrument.read_error_queue()
        problems.extend(f"instrument error {code}, \"{text}\"" for code, text in leftover)
    except BenchlabError as exc:
        problems.append(str(exc))
    return InstrumentCheck(output_was_on=output_was_on, round_trips=tuple(trips), problems=tuple(problems), **base)


def identity_notes(identity: str) -> list[str]:
    """Remarks on an ``*IDN?`` reply that does not have the shape IEEE 488.2 asks for.

    IEEE 488.2 (*IDN?, section 10.14 from memory) defines the reply as four comma-separated fields: maker, model,
    serial number (or 0), firmware level (or 0).
    """
    fields = identity.split(",")
    if len(fields) != 4:
        return [f"the *IDN? reply has {len(fields)} field(s), not the 4 of IEEE 488.2 (maker,model,serial,firmware)"]
    if not fields[0].strip() or not fields[1].strip():
        return ["the *IDN? reply leaves the maker or model field empty"]
    return []


def _trip(setting: str, sent: float, operation: str, instrument: ScpiInstrument,
          read: Callable[[], float]) -> RoundTrip:
    if not instrument.profile.has(operation):
        return RoundTrip(setting, sent, None, True, f"not read back (profile has no '{operation}')")
    value = read()
    same = math.isclose(value, sent, rel_tol=_REL_TOLERANCE, abs_tol=_ABS_TOLERANCE)
    return RoundTrip(setting, sent, value, same, "" if same else "read back a different value")


def _supply_trips(supply: ScpiSupply, config: BenchConfig) -> list[RoundTrip]:
    # 0 V with the output off is the one setpoint that is harmless on any bench.
    supply.set_voltage(0.0)
    trips = [_trip("voltage setpoint (V)", 0.0, "get_voltage", supply, supply.voltage_setpoint)]
    supply.set_current_limit(config.limits.max_drain_a)
    trips.append(_trip("current limit (A)", config.limits.max_drain_a, "get_current_limit", supply,
                       supply.current_limit))
    return trips


def _meter_trips(meter: ScpiMeter, config: BenchConfig) -> list[RoundTrip]:
    meter.configure_voltage(None, nplc=config.nplc)
    return [_trip("DC volts integration (NPLC)", config.nplc, "get_voltage_nplc", meter,
                  lambda: meter.nplc_setting("voltage"))]


def _smu_trips(smu: ScpiSmu, config: BenchConfig) -> list[RoundTrip]:
    smu.configure_source("voltage", config.limits.max_drain_a)
    trip = _trip("current compliance (A)", config.limits.max_drain_a, "get_current_compliance", smu, smu.compliance)
    smu.set_level(0.0)
    smu.set_nplc(config.nplc)
    return [trip]


_ROUND_TRIPS: dict[str, Callable[[Any, BenchConfig], list[RoundTrip]]] = {
    "supply": _supply_trips,
    "meter": _meter_trips,
    "smu": _smu_trips,
}


def format_check_report(report: BenchCheckReport) -> str:
    """The report as text for the terminal."""
    lines = [f"bench: {report.source}", f"fixture: {report.fixture}"]
    for check in report.instruments:
        lines.append(f"[{'ok' if check.ok else 'FAIL'}] {check.role}: {check.resource}")
        lines.append(f"    identity: {check.identity}")
        lines.append(f"    profile:  {check.profile}")
        if check.output_was_on is not None:
            lines.append(f"    output:   {'ON (left as found)' if check.output_was_on else 'off (left off)'}")
        for trip in check.round_trips:
            back = "-" if trip.read_back is None else f"{trip.read_back:g}"
            mark = "ok" if trip.ok else "MISMATCH"
            lines.append(f"    {trip.setting}: sent {trip.sent:g}, read {back}  {mark} {trip.note}".rstrip())
        for problem in check.problems:
            lines.append(f"    problem: {problem}")
        for note in check.notes:
            lines.append(f"    note: {note}")
    lines.append("result: " + ("all instruments answered and round-tripped; no output was enabled" if report.ok
                               else "problems found (see above); no output was enabled"))
    return "\n".join(lines)


@dataclass(frozen=True)
class ProfileEntry:
    """One profile found on the search path."""

    name: str
    path: str
    role: str | None
    description: str
    problem: str | None = None  # the validation error, when the file is not usable

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def list_profiles() -> tuple[list[str], list[ProfileEntry]]:
    """The search path (lowest priority first) and every profile on it, each validated."""
    entries = []
    for name, path in sorted(available_profiles().items()):
        try:
            profile = load_profile(str(path))
            entries.append(ProfileEntry(name, str(path), profile.role, profile.description))
        except ConfigError as exc:
            entries.append(ProfileEntry(name, str(path), None, "", str(exc)))
    return [str(folder) for folder in profile_search_path()], entries


__all__ = ["BenchCheckReport", "InstrumentCheck", "RoundTrip", "ProfileEntry", "check_bench", "check_bench_file",
           "check_simulator_bench", "format_check_report", "list_profiles"]
