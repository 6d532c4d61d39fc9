"""Thermal characterization of one part: temperature coefficients and the ZTC point, thermal resistance.

Used by ``benchlab thermal tempco`` / ``benchlab thermal rth`` (and the terminal UI and the API: every entry
point takes callbacks and a cancel event and returns a :class:`ThermalOutcome`, plain data).
Order of work, so bad input never writes or powers anything: read the bench (or the simulator's thermal
setup), check the temperatures and powers against its ``[thermal]`` limits, connect, then create the
session folder, refuse a fixture already above its limit, and measure. The output is off on every way out
and a controlled fixture goes back to where it started.
"""

from __future__ import annotations

import contextlib
import json
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable

import numpy as np

from benchlab.errors import InputError
from benchlab.extract.sweepdata import validate_points
from benchlab.extract.thermal import RthResult, TempcoResult, rth_electrical, tempco_from_sweeps
from benchlab.kinds import Fixture, PointStatus
from benchlab.services import characterize as chz
from benchlab.sweep.plan import Limits
from benchlab.sweep.session import SessionWriter, check_name, write_json_atomic
from benchlab.sweep.thermal_plan import RthPlan, TempcoPlan, validate_rth_plan, validate_tempco_plan
from benchlab.sweep.thermal_run import ThermalLog, run_rth, run_tempco

KELVIN = 273.15
RESULT_KEYS = ("vth_tempco", "kp_exponent", "ztc_vgs", "ztc_id", "rth")
CAUTION = ("Caution: thermal runs heat the part and its fixture well above room temperature (up to the bench file's "
           "max_junction_k); let them cool before touching them, keep the heated block away from anything flammable, "
           "and follow local electrical codes and your workshop's rules.")
# the sweep taken at each temperature: pulsed (5 % duty) so the junction stays at the fixture's temperature
TEMPCO_SWEEP = {"points": 20, "max_current_a": 0.2, "pulsed_duty": 0.05, "down_sweep": False}
PULSED_DC_TOLERANCE = 0.2  # relative disagreement between the pulsed/DC shift and its prediction that flags the part


@dataclass(frozen=True)
class ThermalOutcome:
    """One thermal measurement of one part (SI units)."""

    part: str
    measurement: str  # "tempco" or "rth"
    tempco: TempcoResult | None = None
    rth: RthResult | None = None
    session_path: str = ""
    settle_criterion: str = ""
    stored: str = ""  # where it went in the library ("" when the part is not there)
    notes: tuple[str, ...] = field(default_factory=tuple)

    def values(self) -> dict[str, float | None]:
        """The five headline numbers (None where this measurement does not give them)."""
        t, r = self.tempco, self.rth
        return {"vth_tempco": t.vth_tempco if t else None, "kp_exponent": t.kp_exponent if t else None,
                "ztc_vgs": t.ztc_vgs if t else None, "ztc_id": t.ztc_id if t else None, "rth": r.rth if r else None}

    def stderrs(self) -> dict[str, float | None]:
        """Standard errors of :meth:`values`, same keys."""
        out = dict(self.tempco.stderr) if self.tempco else {k: None for k in RESULT_KEYS[:4]}
        out["rth"] = self.rth.rth_stderr if self.rth else None
        return {k: out.get(k) for k in RESULT_KEYS}

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON: the five values and ``stderr`` at the top, the details below."""
        return {"part": self.part, "measurement": self.measurement, **self.values(), "stderr": self.stderrs(),
                "session_path": self.session_path, "settle_criterion": self.settle_criterion,
                "stored": self.stored, "notes": list(self.notes),
                "tempco_details": self.tempco.to_dict() if self.tempco else None,
                "rth_details": self.rth.to_dict() if self.rth else None}


def _thermal_setup(bench_path: str | None, sim: chz.SimOptions | None, handle: chz.BenchHandle | None = None):
    """The bench's ``[thermal]`` table and limits, read before anything is started (sim: its built-in setup).

    With ``handle`` (a bench already open, e.g. the terminal UI's), its own configuration is used.
    """
    if handle is not None:
        if bench_path is not None or sim is not None:
            raise InputError("give either an open bench or --bench / --sim, not both")
        return bench_thermal(handle), Limits.from_safety_limits(handle.config.limits)
    if (bench_path is None) == (sim is None):
        raise InputError("say which bench: --bench CONFIG (a bench file) or --sim (the simulated bench)")
    from benchlab.instruments.thermal_config import simulator_thermal_config

    if sim is not None:
        from benchlab.instruments.config import simulator_bench_config

        nominal = simulator_bench_config({"smu": "TCPIP0::127.0.0.1::3::SOCKET"}, fixture=Fixture.SMU)
        return simulator_thermal_config("TCPIP0::127.0.0.1::3::SOCKET"), Limits.from_safety_limits(nominal.limits)
    config = chz.load_config(bench_path)
    if config.thermal is None:
        raise InputError("the bench file has no [thermal] table (fixture temperature sensor and limits): see "
                         "docs/bench-config.md", path=bench_path)
    return config.thermal, Limits.from_safety_limits(config.limits)


def bench_thermal(handle: chz.BenchHandle):
    """The ``[thermal]`` table of an open bench; on the built-in simulator its heated block and thermistor (read
    and set through the simulator's own commands on one of its instruments)."""
    from benchlab.instruments.thermal_config import simulator_thermal_config

    if handle.simulator is not None:
        role = "smu" if handle.config.fixture == Fixture.SMU else "meter"
        return simulator_thermal_config(handle.config.instruments[role].resource)
    if handle.config.thermal is None:
        raise InputError("the bench file has no [thermal] table (fixture temperature sensor and limits): see "
                         "docs/bench-config.md")
    return handle.config.thermal


def _no_typing(prompt: str) -> str:
    raise InputError("this bench's fixture temperature is typed in by the operator ([thermal.sensor] kind = "
                     "\"manual\"): run the measurement from the command line (benchlab thermal), which asks for it")


@contextlib.contextmanager
def _opened(bench_path, sim, handle, plan_options, say, ask=None):
    """The bench (connected here, or the caller's ``handle``), its sweep plan, fixture sensor and clock.

    Yields (handle, sweep plan, FixtureThermal, clock). A bench connected here is closed on the way out; a
    borrowed one is only switched off (its owner closes it).
    """
    from benchlab.instruments.thermometer import RealClock, SimClock, open_fixture_thermal

    owned = handle is None
    if owned:
        if sim is not None:
            sim = replace(sim, fixture=Fixture.SMU)
        handle, plan = chz.prepare(bench_path, sim, plan_options, say=say)
    else:
        plan = chz.build_plan(handle.config, **plan_options)
    try:
        thermal = open_fixture_thermal(bench_thermal(handle), say=say, ask=ask)
        try:
            clock = SimClock(next(iter(thermal.transports.values()))) if handle.simulator is not None \
                else RealClock()
            yield handle, plan, thermal, clock
        finally:
            thermal.close()
    finally:
        if owned:
            handle.close()
        else:
            handle.bench.safe_off()


def _seat(handle, part: str, seat: bool) -> None:
    """On the simulator: seat the part of that label (``seat``), or check that it is the one in the fixture."""
    if handle.simulator is None:
        return
    loader = chz.SimPartLoader(handle.bench)
    if seat:
        loader.seek(part)
    elif loader.label() != part:
        raise InputError(f"the simulator's fixture holds {loader.label() or 'no part'}, not {part}: measure that "
                         "label (or seat the next part)")


@contextlib.contextmanager
def _recording(handle, thermal, sessions_root, part: str, measurement: str, plan, planned: int, on_record=None):
    """A new session folder ``<stamp>-thermal-<part>`` and its ``thermal.jsonl`` (plan first), closed on the way out.
    ``on_record(kind, values)`` hears every line once it is on disk (the UI shows the fixture and readings)."""
    session = SessionWriter.create(sessions_root, f"thermal-{part}", planned_count=planned, **chz.session_meta(handle))
    log = ThermalLog(session.path / "thermal.jsonl", listener=on_record)
    try:
        log.add("plan", measurement=measurement, part=part, plan=plan.to_dict(),
                settle=thermal.config.settle_criterion())
        yield session, log
    finally:
        log.close()
        session.finish()


def _sweep_of(outcome):
    """The fittable points of a sweep outcome as a validated :class:`Sweep`."""
    keep = [p for p in outcome.points if p.status == PointStatus.OK and p.id > 2e-6]
    if len(keep) < 5:
        raise InputError(f"{outcome.label}: only {len(keep)} usable points ({outcome.reason})")
    return validate_points([p.vgs for p in keep], [p.id for p in keep], [p.direction for p in keep],
                           source=outcome.label)


def measure_tempco(part: str, temperatures_c, *, bench_path: str | None = None, sim: chz.SimOptions | None = None,
                   handle: chz.BenchHandle | None = None, seat: bool = True,
                   sessions_root: str | Path = chz.DEFAULT_SESSIONS_DIR, library: str | None = None,
                   lot: str | None = None, model: str = "auto", bootstrap: int = 100, on_event: Callable[[Any], None] | None = None,
                   say: Callable[[str], None] | None = None, cancel=None,
                   on_record: Callable[[str, dict], None] | None = None,
                   sweep_options: dict[str, Any] | None = None) -> ThermalOutcome:
    """Sweep ``part`` at each fixture temperature (degC) and extract dVth/dT, m and the ZTC point.

    The bench is ``bench_path`` or ``sim`` (connected here and closed at the end), or ``handle``, a bench the
    caller keeps open (the terminal UI); on a borrowed simulator ``seat=False`` measures the part already in the
    fixture (its label must be ``part``). ``on_record(kind, values)`` hears every line of ``thermal.jsonl``.
    ``lot`` names the library part's lot when its label is in several lots (the values are stored on LOT/LABEL).

    Raises
    ------
    InputError, SafetyError
        Bad input (nothing connected or powered), a fixture above its limit (nothing powered).
    BenchlabError
        Instrument problems and cancellation, after the output is off.
    """
    check_name("part label", part)
    if lot is not None:
        check_name("lot name", lot)
    temps_k = tuple(float(t) + KELVIN for t in temperatures_c)
    thermal_cfg, _ = _thermal_setup(bench_path, sim, handle)
    validate_tempco_plan(TempcoPlan(temps_k, None, model, bootstrap), thermal_cfg)  # type: ignore[arg-type]
    options = {**TEMPCO_SWEEP, **(sweep_options or {})}
    _caution(bench_path, handle, say)
    with _opened(bench_path, sim, handle, options, say, ask=None if handle is None else _no_typing) as \
            (bench, splan, thermal, clock):
        plan = validate_tempco_plan(TempcoPlan(temps_k, splan, model, bootstrap), thermal.config)
        with chz.sigterm_as_exception():
            _seat(bench, part, seat)
            chz.preflight(splan, bench.bench)
            with _recording(bench, thermal, sessions_root, part, "tempco", plan, len(temps_k), on_record) as \
                    (session, log):
                records = run_tempco(plan, bench.bench, thermal, clock, session, part, log, on_event=on_event,
                                     cancel=cancel, say=say)
    result = tempco_from_sweeps([_sweep_of(outcome) for _, outcome, _, _ in records], [t for *_, t, _ in records],
                                temperature_sigma_k=[s for *_, s in records], model=model, bootstrap=bootstrap)
    outcome = ThermalOutcome(part=part, measurement="tempco", tempco=result, session_path=str(session.path),
                             settle_criterion=thermal.config.settle_criterion(), notes=result.notes)
    return _finish(outcome, session.path, library, lot)


def measure_rth(part: str, *, bench_path: str | None = None, sim: chz.SimOptions | None = None,
                handle: chz.BenchHandle | None = None, seat: bool = True,
                sessions_root: str | Path = chz.DEFAULT_SESSIONS_DIR, library: str | None = None,
                lot: str | None = None, plan: RthPlan | None = None, say: Callable[[str], None] | None = None,
                cancel=None, on_record: Callable[[str, dict], None] | None = None) -> ThermalOutcome:
    """Thermal resistance of ``part`` in the fixture by the electrical method, with the pulsed/DC cross-check.

    The bench, ``seat`` and ``on_record`` as for :func:`measure_tempco`.

    Raises
    ------
    InputError, SafetyError
        Bad input (nothing connected or powered), a fixture above its limit (nothing powered), a junction or
        power passing its limit while heating (output off at once).
    BenchlabError
        Instrument problems and cancellation, after the output is off.
    """
    check_name("part label", part)
    if lot is not None:
        check_name("lot name", lot)
    plan = plan or RthPlan()
    thermal_cfg, limits = _thermal_setup(bench_path, sim, handle)
    validate_rth_plan(plan, thermal_cfg, limits)
    _caution(bench_path, handle, say)
    with _opened(bench_path, sim, handle, {}, say, ask=None if handle is None else _no_typing) as \
            (bench, _, thermal, clock):
        limits = Limits.from_safety_limits(bench.config.limits)
        validate_rth_plan(plan, thermal.config, limits)
        with chz.sigterm_as_exception():
            _seat(bench, part, seat)
            with _recording(bench, thermal, sessions_root, part, "rth", plan, 0, on_record) as (session, log):
                raw = run_rth(plan, bench.bench, thermal, clock, limits, log, cancel=cancel, say=say)
    result = rth_result(raw, plan)
    outcome = ThermalOutcome(part=part, measurement="rth", rth=result, session_path=str(session.path),
                             settle_criterion=thermal.config.settle_criterion(), notes=result.notes)
    return _finish(outcome, session.path, library, lot)


def _caution(bench_path, handle, say) -> None:
    """The hot-fixture caution, before a real bench is powered."""
    real = bench_path is not None or (handle is not None and handle.simulator is None)
    if real and say is not None:
        say(CAUTION)


def rth_result(raw: dict[str, Any], plan: RthPlan) -> RthResult:
    """Turn the raw readings of :func:`benchlab.sweep.thermal_run.run_rth` into an :class:`RthResult`.

    The pulsed/DC cross-check: the heating current's VGS after heating (DC, self-heated) minus its pulsed
    value at the reference temperature should equal (dVGS/dT at that current, from the two calibration
    temperatures) x (the junction rise measured by the sense voltage); the part is flagged when the two differ
    by more than 20 % of the prediction, 3 standard errors and 2 mV.
    """
    numbers = rth_electrical(cal_temps_k=raw["cal_temps_k"], cal_volts=raw["cal_volts"],
                             cal_sigma_v=raw["cal_sigma_v"], cal_sigma_k=raw["cal_sigma_k"], cold_v=raw["cold_v"],
                             cooling_t_s=raw["cooling_t_s"], cooling_v=raw["cooling_v"], power_w=raw["power_w"],
                             heatsink_k_per_w=plan.heatsink_k_per_w,
                             reference_rise_k=raw.get("reference_rise_k", 0.0))
    measured = raw["v_heat_dc"] - raw["v_heat_cold"]
    predicted = raw["dvdt_heat"] * numbers["junction_rise_k"]
    sigma = abs(predicted) * numbers["k_factor_stderr"] / abs(numbers["k_factor"]) + raw["cal_sigma_v"] * 2
    allowed = max(PULSED_DC_TOLERANCE * abs(predicted), 3 * sigma, 2e-3)
    check = {"heating_current_a": raw["heating_current_a"], "vgs_pulsed": raw["v_heat_cold"],
             "vgs_dc": raw["v_heat_dc"], "shift_measured_v": measured, "shift_predicted_v": predicted,
             "allowed_v": allowed, "flag": bool(abs(measured - predicted) > allowed)}
    notes = list(raw["notes"])
    if check["flag"]:
        notes.append(f"pulsed vs DC: the self-heated VGS moved {measured * 1e3:+.1f} mV, the measured Rth and tempco "
                     f"predict {predicted * 1e3:+.1f} mV: check the part and the fixture")
    if numbers["rth"] <= 0:
        notes.append("the heat-sink figure is larger than the measured junction-to-reference resistance")
    return RthResult(rth=numbers["rth"], rth_stderr=numbers["rth_stderr"], rth_uncorrected=numbers["rth_uncorrected"],
                     k_factor=numbers["k_factor"], k_factor_stderr=numbers["k_factor_stderr"],
                     power_w=raw["power_w"], junction_rise_k=numbers["junction_rise_k"], delay_s=numbers["delay_s"],
                     sense_current_a=plan.sense_current_a, heating_current_a=raw["heating_current_a"],
                     heating_s=raw["heating_s"], reference_k=raw["reference_k"],
                     heatsink_k_per_w=plan.heatsink_k_per_w, pulsed_dc=check, notes=tuple(notes),
                     reference_rise_k=raw.get("reference_rise_k", 0.0))


def _finish(outcome: ThermalOutcome, session_path: Path, library: str | None,
            lot: str | None = None) -> ThermalOutcome:
    """Write the result next to the readings and store it in the library when the part is there."""
    stored = store_in_library(outcome, library, lot)
    outcome = replace(outcome, stored=stored)
    write_json_atomic(session_path / f"thermal-{outcome.measurement}.json", outcome.to_dict())
    return outcome


def store_in_library(outcome: ThermalOutcome, library: str | None, lot: str | None = None) -> str:
    """Store the measured values on the part in the library, if a part of that label is there ("" otherwise).

    An existing library is opened (none is created for a thermal run); a label in several lots is ambiguous
    without ``lot`` and the values are not stored (said in the return value, with how to name the lot).
    """
    from benchlab.errors import LibraryError
    from benchlab.library.thermal import record_thermal
    from benchlab.services.library import library_path, open_library

    where = library_path(library)
    if isinstance(where, Path) and not where.exists():
        return ""
    try:
        with open_library(library) as lib:
            try:
                part = lib.get_part(outcome.part if lot is None else f"{lot}/{outcome.part}")
            except LibraryError as exc:
                if "no part" in str(exc) and lot is None:
                    return ""
                hint = ("; give the lot to store the values (--lot, or LOT/LABEL in the terminal UI's part field)"
                        if "ambiguous" in str(exc) else "")
                return f"not stored: {exc}{hint}"
            details = outcome.to_dict()
            with lib.write():
                row = record_thermal(lib, part.id, outcome.measurement, outcome.values(), outcome.stderrs(),
                                     session_path=outcome.session_path,
                                     details={k: details[k] for k in ("tempco_details", "rth_details", "notes")})
            return f"{lib.path}: part {part.lot}/{part.label}, thermal record {row}"
    except LibraryError as exc:
        return f"not stored: {exc}"


def library_thermal(library: str | None, part: str) -> list[dict[str, Any]]:
    """What the designer will use for ``part``: per quantity its value, standard error and source.

    The source is ``measured <when>`` (the newest stored run) or the default assumption the designer falls back
    on (:mod:`benchlab.design.part_thermal`); an empty list when the library or the part is not there.
    """
    from benchlab.design.part_thermal import DEFAULT_KP_EXPONENT, DEFAULT_VTH_TEMPCO, PACKAGE_RTH_K_PER_W
    from benchlab.errors import LibraryError
    from benchlab.library.thermal import measured_thermal
    from benchlab.services.library import library_path, open_library

    where = library_path(library)
    if isinstance(where, Path) and not where.exists():
        return []
    assumed = {"vth_tempco": (DEFAULT_VTH_TEMPCO, f"default assumption {DEFAULT_VTH_TEMPCO * 1e3:g} mV/K"),
               "kp_exponent": (DEFAULT_KP_EXPONENT, f"default assumption KP ~ T^-{DEFAULT_KP_EXPONENT:g}"),
               "ztc_vgs": (None, "derived by the designer from the fitted curve and the coefficients"),
               "ztc_id": (None, "derived by the designer from the fitted curve and the coefficients"),
               "rth": (PACKAGE_RTH_K_PER_W, f"default assumption {PACKAGE_RTH_K_PER_W:g} K/W (TO-220-like package)")}
    try:
        with open_library(library) as lib:
            measured = measured_thermal(lib, lib.get_part(part).id)
    except LibraryError:
        return []
    rows = []
    for key in RESULT_KEYS:
        entry = measured.get(key)
        if entry is not None and entry.get("value") is not None:
            rows.append({"quantity": key, "value": entry["value"], "stderr": entry.get("stderr"),
                         "source": f"measured {(entry.get('measured_at') or '')[:16].replace('T', ' ')}".strip()})
        else:
            rows.append({"quantity": key, "value": assumed[key][0], "stderr": None, "source": assumed[key][1]})
    return rows


UNITS = {"vth_tempco": (1e3, "mV/K"), "kp_exponent": (1.0, ""), "ztc_vgs": (1.0, "V"), "ztc_id": (1e3, "mA"),
         "rth": (1.0, "K/W")}


def format_value(key: str, value: float | None, err: float | None = None) -> str:
    """One quantity in its display unit, with its standard error when known (``-`` for no value)."""
    if value is None:
        return "-"
    scale, unit = UNITS[key]
    plus = f" +/- {err * scale:.3g}" if err is not None and math.isfinite(err) else ""
    return f"{value * scale:.4g}{plus} {unit}".rstrip()


def format_outcome(outcome: ThermalOutcome) -> list[str]:
    """Lines for people: each value with its standard error and where it came from."""
    values, errs = outcome.values(), outcome.stderrs()
    lines = [f"{outcome.part}: {outcome.measurement} (session {outcome.session_path})"]
    for key, value in values.items():
        if value is not None:
            lines.append(f"  {key:<12} {format_value(key, value, errs.get(key))}")
    if outcome.tempco is not None and outcome.tempco.ztc_extrapolated:
        lines.append("  (ZTC point extrapolated beyond the swept range)")
    if outcome.rth is not None:
        r = outcome.rth
        lines.append(f"  K-factor {r.k_factor * 1e3:.3f} mV/K at {r.sense_current_a * 1e3:g} mA; {r.power_w:.3g} W for "
                     f"{r.heating_s:.0f} s; first reading {r.delay_s * 1e3:.0f} ms after the switch, extrapolated "
                     f"to it against sqrt(t) (uncorrected {r.rth_uncorrected:.4g} K/W)")
        flag = "FLAGGED" if r.pulsed_dc.get("flag") else "agrees"
        lines.append(f"  pulsed vs DC at {r.heating_current_a * 1e3:.0f} mA: {flag} (shift "
                     f"{r.pulsed_dc['shift_measured_v'] * 1e3:+.1f} mV, predicted "
                     f"{r.pulsed_dc['shift_predicted_v'] * 1e3:+.1f} mV)")
    lines.append(f"  fixture settling: {outcome.settle_criterion}")
    lines.extend(f"  note: {n}" for n in outcome.notes)
    lines.append(f"  library: {outcome.stored or 'part not in the library, not stored'}")
    return lines


def dumps(outcome: ThermalOutcome) -> str:
    """The one JSON object ``--json`` prints."""
    return json.dumps(outcome.to_dict(), default=lambda v: v.item() if isinstance(v, np.generic) else str(v))


__all__ = ["ThermalOutcome", "measure_rth", "measure_tempco", "rth_result", "format_outcome", "format_value", "dumps",
           "store_in_library", "library_thermal", "bench_thermal", "CAUTION"]
