"""The technician's station: what the terminal UI's bench loop and hands-free mode call.

Everything here is plain logic over the other services, so the UI holds none of its own: the
acceptance window and its verdict, the running label, judging a swept part (fit, flags, leakage,
VGS bin), storing it in the library as accepted or rejected, reading the output state the
instruments report, aborting. The hands-free loop is in :mod:`benchlab.services.handsfree`.
"""

from __future__ import annotations

import math
import re
import threading
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable

from benchlab.bounds import check_operating_current
from benchlab.errors import BenchlabError, InputError
from benchlab.kinds import PartClass, PointStatus
from benchlab.sweep.classify import LEAK_VGS_FRACTION
from benchlab.sweep.records import SweepOutcome

DEFAULT_BIN_CURRENT_A = 250e-6  # VGS bins at the constant-current threshold criterion (common practice)
DEFAULT_BIN_WIDTH_V = 0.05
LOST_CONTACT = "failed open during the sweep"  # the engine's words when a conducting part stops conducting


# --------------------------------------------------------------------------------------------- labels
@dataclass(frozen=True)
class LabelPattern:
    """A prefix and a running number: ``Q`` and 7 with width 2 give ``Q07``; :meth:`advanced` gives ``Q08``."""

    prefix: str = "Q"
    number: int = 1
    width: int = 2

    @property
    def label(self) -> str:
        return f"{self.prefix}{self.number:0{self.width}d}"

    def advanced(self) -> "LabelPattern":
        return replace(self, number=self.number + 1)

    @classmethod
    def parse(cls, text: str) -> "LabelPattern":
        """``Q07`` -> prefix ``Q``, number 7, width 2; one clear error for a label without a number."""
        from benchlab.sweep.session import check_name

        match = re.fullmatch(r"(.*?)(\d+)", text.strip())
        if not match:
            raise InputError(f"a label pattern ends in a number, e.g. Q01 or LED-001, got {text!r}")
        check_name("part label", text.strip())
        return cls(match.group(1), int(match.group(2)), len(match.group(2)))


# --------------------------------------------------------------------------------------------- acceptance
@dataclass(frozen=True)
class AcceptanceWindow:
    """What a part must meet to pass (``None``: no limit on that quantity). SI units."""

    vth_min: float | None = None
    vth_max: float | None = None
    kp_min: float | None = None  # A/V^2
    leakage_max_a: float | None = None
    hysteresis_max_v: float | None = None

    def __post_init__(self) -> None:
        for name in ("vth_min", "vth_max", "kp_min", "leakage_max_a", "hysteresis_max_v"):
            value = getattr(self, name)
            if value is not None and not (isinstance(value, (int, float)) and math.isfinite(value)):
                raise InputError(f"acceptance {name} must be a number, got {value!r}")
        for name in ("kp_min", "leakage_max_a", "hysteresis_max_v"):  # limits on sizes: never below zero
            if getattr(self, name) is not None and getattr(self, name) < 0:
                raise InputError(f"acceptance {name} must be 0 or more, got {getattr(self, name):g}")
        if self.vth_min is not None and self.vth_max is not None and self.vth_min > self.vth_max:
            raise InputError(f"acceptance Vth range is empty ({self.vth_min:g} V > {self.vth_max:g} V)")

    def failures(self, vth: float | None, kp: float | None, leakage_a: float | None,
                 hysteresis_v: float | None) -> tuple[str, ...]:
        """The limits a part misses, in words (empty: it passes)."""
        out = []
        if self.vth_min is not None and (vth is None or vth < self.vth_min):
            out.append(f"Vth {_v(vth)} below {self.vth_min:.3f} V")
        if self.vth_max is not None and (vth is None or vth > self.vth_max):
            out.append(f"Vth {_v(vth)} above {self.vth_max:.3f} V")
        if self.kp_min is not None and (kp is None or kp < self.kp_min):
            out.append(f"KP {kp if kp is not None else float('nan'):.3g} A/V^2 below {self.kp_min:.3g}")
        if self.leakage_max_a is not None and leakage_a is not None and leakage_a > self.leakage_max_a:
            out.append(f"leakage {leakage_a:.3g} A above {self.leakage_max_a:.3g} A")
        if self.hysteresis_max_v is not None and hysteresis_v is not None and abs(hysteresis_v) > self.hysteresis_max_v:
            out.append(f"hysteresis {hysteresis_v * 1e3:.1f} mV above {self.hysteresis_max_v * 1e3:.1f} mV")
        return tuple(out)


def _v(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.3f} V"


@dataclass(frozen=True)
class PartVerdict:
    """A swept part judged: the fit, the class, pass / fail against the window, its VGS bin."""

    label: str
    classification: PartClass | None
    reason: str
    complete: bool
    passed: bool
    failures: tuple[str, ...]
    lost_contact: bool  # the part stopped conducting mid-sweep (pulled out, or failed open): never stored
    session_path: Path | None = None
    points: int = 0
    fit: Any = None  # FitResult or None
    fit_problem: str = ""
    leakage_a: float | None = None
    vgs_bin: str = ""
    vgs_at_bin_current: float | None = None

    @property
    def storable(self) -> bool:
        """True when the sweep may go into the library (complete, and the part did not drop out)."""
        return self.complete and not self.lost_contact and self.session_path is not None

    def headline(self) -> str:
        if self.lost_contact:
            return "LOST CONTACT"
        if not self.complete:
            return "STOPPED"
        return "PASS" if self.passed else "FAIL"


# --------------------------------------------------------------------------------------------- heating
# a rise above this (over 55 degC in a 25 degC room) makes a part's metal tab hurt to touch (common practice)
HOT_RISE_K = 30.0


@dataclass(frozen=True)
class PartHeating:
    """The thermal resistance behind a part's estimated temperature rise, and where it came from."""

    rth_k_per_w: float
    measured: bool
    source: str

    def rise_k(self, power_w: float) -> float:
        """Temperature rise at ``power_w`` once settled, P x Rth (K): an upper bound for a short sweep."""
        return power_w * self.rth_k_per_w

    def hot(self, power_w: float) -> bool:
        """True when ``power_w`` could make the part too hot to touch (rise at least ``HOT_RISE_K``)."""
        return self.rise_k(power_w) >= HOT_RISE_K

    def describe(self) -> str:
        if self.measured:
            return f"Rth {self.rth_k_per_w:.3g} K/W {self.source}"
        return f"Rth {self.rth_k_per_w:.3g} K/W assumed, not measured ({self.source})"


def part_heating(library: str | Path | None, lot: str, label: str) -> PartHeating:
    """The Rth for the part ``lot/label``: its newest measured value in the library (``benchlab thermal rth``,
    table part_thermal), else the designer's default assumption, marked as assumed."""
    from benchlab.design.part_thermal import PACKAGE_RTH_K_PER_W
    from benchlab.services.thermal import library_thermal

    try:
        rows = library_thermal(library, f"{lot}/{label}")
    except BenchlabError:  # a library out of reach: the sweep goes on with the assumption
        rows = []
    for row in rows:
        if row["quantity"] == "rth" and row["value"] is not None and row["source"].startswith("measured"):
            return PartHeating(float(row["value"]), True, row["source"])
    return PartHeating(PACKAGE_RTH_K_PER_W, False, "a free-standing TO-220-like package")


def leakage_of(outcome: SweepOutcome) -> float | None:
    """The largest current measured far below threshold (at or under LEAK_VGS_FRACTION of VGS at the
    reference current), the quantity the classifier calls leakage; None without a reference point."""
    if outcome.vgs_at_ref is None:
        return None
    low = [p.id for p in outcome.points if p.direction == "up" and p.status == PointStatus.OK
           and 0 < p.vgs <= LEAK_VGS_FRACTION * outcome.vgs_at_ref and math.isfinite(p.id)]
    return max(low) if low else 0.0


def judge(outcome: SweepOutcome, session_path: Path | None, window: AcceptanceWindow, *,
          bin_current_a: float = DEFAULT_BIN_CURRENT_A, bin_width_v: float = DEFAULT_BIN_WIDTH_V) -> PartVerdict:
    """Fit a swept part (``services.fitting``) and judge it against ``window``."""
    from benchlab.services.fitting import fit_files

    kind = PartClass.parse(outcome.classification)
    lost = LOST_CONTACT in (outcome.reason or "")
    fit, problem = None, ""
    if outcome.complete and session_path is not None and kind is PartClass.GOOD and not lost:
        try:
            run = fit_files([session_path / f"{outcome.label}.json"], at_current=bin_current_a)
            fit = run.records[0].result if run.records else None
            problem = "; ".join(why for _, why in run.skipped)
        except BenchlabError as exc:
            problem = str(exc)
    leakage = leakage_of(outcome)
    vgs_bin_at = fit.vgs_at_current if fit is not None else outcome.vgs_at_ref
    failures: tuple[str, ...] = ()
    if kind is not PartClass.GOOD:
        failures = (f"{outcome.classification}: {outcome.reason}",)
    elif fit is None:
        failures = (f"no fit: {problem or 'too few points'}",)
    else:
        failures = window.failures(fit.vth, fit.kp, leakage, fit.hysteresis_v)
    vgs_bin = ""
    if vgs_bin_at is not None and math.isfinite(vgs_bin_at):
        k = math.floor(vgs_bin_at / bin_width_v + 1e-9)
        vgs_bin = f"{k * bin_width_v:.2f}-{(k + 1) * bin_width_v:.2f} V"
    return PartVerdict(outcome.label, kind, outcome.reason, outcome.complete, not failures and outcome.complete,
                       failures, lost, session_path, len(outcome.points), fit, problem, leakage, vgs_bin, vgs_bin_at)


def store(verdict: PartVerdict, library: str | Path | None, lot: str, *, accept: bool, reason: str = "",
          operator: str | None = None) -> str:
    """Put a judged part in the library (its one-part session is imported and fitted there); a rejected
    part is stored with state ``rejected`` and ``reason``, recorded as done by ``operator`` (default the
    login name). Returns what happened, in words."""
    from benchlab.services import library as libsvc

    if not verdict.storable:
        raise InputError(f"{verdict.label}: the sweep did not complete ({verdict.reason}); nothing is stored")
    if not accept and not reason.strip():
        raise InputError("say why the part is rejected (type a reason first)")
    imported = libsvc.import_sessions(library, [str(verdict.session_path)], lot=lot, operator=operator)
    action = imported.sweeps[0].action if imported.sweeps else "skipped"
    spec = f"{lot}/{verdict.label}"
    if not accept:
        try:
            libsvc.set_state(library, spec, "rejected", reason.strip(), operator=operator)
        except BenchlabError as exc:
            if "already" not in str(exc):
                raise
        return f"{spec} stored as rejected ({reason.strip()})"
    return f"{spec} stored ({action})"


# --------------------------------------------------------------------------------------------- the bench
def output_states(handle) -> dict[str, bool | None]:
    """Role -> output on, as the instrument reports it (``None`` when it did not answer)."""
    states: dict[str, bool | None] = {}
    for role in ("supply", "smu"):
        instrument = getattr(handle.bench, role, None)
        if instrument is None:
            continue
        try:
            states[role] = bool(instrument.output_is_on())
        except BenchlabError:
            states[role] = None
    return states


def abort(handle, cancel: threading.Event | None) -> list[str]:
    """Stop now: the running sweep is told to stop and every output is switched off at once (not after
    the sweep's next point). Returns the problems met switching off (empty: every output is off)."""
    if cancel is not None:
        cancel.set()
    if handle is None:
        return []
    return [str(exc) for exc in handle.bench.safe_off()]


def bench_summary(handle) -> dict[str, Any]:
    """What the Bench view shows: instruments, fixture, limits."""
    config = handle.config
    instruments = [{"role": role, "resource": spec.resource, "identity": handle.bench.identities.get(role, "")}
                   for role, spec in config.instruments.items() if role in config.roles()]
    limits = config.limits
    return {"fixture": str(config.fixture), "simulated": handle.simulator is not None,
            "series_resistor_ohm": getattr(config, "series_resistor_ohm", None),
            "series_resistor_tolerance": getattr(config, "series_resistor_tolerance", None),
            "limits": {"max_supply_v": limits.max_supply_v, "max_drain_a": limits.max_drain_a,
                       "max_power_w": limits.max_power_w},
            "instruments": instruments}


def load_next_sim_part(handle) -> str | None:
    """On the simulator: seat the next part of its bag (output off); returns its label."""
    from benchlab.services.characterize import SimPartLoader

    if handle.simulator is None:
        return None
    loader = SimPartLoader(handle.bench)
    loader.started = True
    return loader.next()



# --------------------------------------------------------------------------------------------- library rows
def library_rows(library: str | Path | None, *, text: str = "", gm_at_a: float = 0.02,
                 sort_key: str = "label") -> list[dict[str, Any]]:
    """Parts of the library as plain rows for a table (every state), filtered by ``text`` (matched against lot,
    label, state, classification and flags) and sorted by ``sort_key`` (a row key; missing values last)."""
    from benchlab.services.library import list_parts

    check_operating_current(gm_at_a, "the gm current")
    rows = []
    needle = text.strip().lower()
    for part in list_parts(library, state="all"):
        params = part.params
        row = {"spec": part.spec, "lot": part.lot, "label": part.label, "state": part.state,
               "classification": part.classification or "", "flags": ",".join(part.flags),
               "vth": params.vth if params else None, "kp": params.kp if params else None,
               "theta": params.theta if params else None,
               "vgs_250u": part.vgs_ref,  # as the library stored it with the curve (benchlab.library.operating)
               "gm": _safe(lambda: float(params.gm_at(gm_at_a))) if params else None}
        haystack = " ".join(str(row[k]) for k in ("lot", "label", "state", "classification", "flags")).lower()
        if needle and needle not in haystack:
            continue
        rows.append(row)
    from benchlab.library.records import natural_key

    def key(row):
        value = row.get(sort_key)
        if sort_key in ("label", "lot", "spec"):
            return (0, natural_key(str(value)))
        return (value is None, value if value is not None else 0.0)
    return sorted(rows, key=key)


def _safe(compute: Callable[[], float]) -> float | None:
    try:
        value = compute()
    except (ValueError, ArithmeticError, BenchlabError):
        return None
    return value if math.isfinite(value) else None


def part_curve(library: str | Path | None, spec: str, points: int = 60) -> dict[str, Any]:
    """A part's last stored sweep (usable points) and its fitted curve over the same VGS range, with the
    residuals of the stored fit at the measured points inside the current range it was fitted on: measured /
    fitted - 1 in percent (``residual_vgs``, ``residual_pct``, as the report's figure draws them), their rms as a
    fraction, and how many points lie outside that range (``outside_window``, not in the residuals)."""
    import numpy as np

    from benchlab.services.library import open_library

    with open_library(library) as lib:
        part = lib.get_part(spec)
        sweeps = lib.sweeps(part, with_points=True)
        window = lib.fit_window(part.fit_id) if part.fit_id is not None else None
    measured = ([], [])
    if sweeps:
        last = sweeps[-1]
        keep = [(v, i) for v, i, st in zip(last["vgs"], last["id"], last["status"])
                if st == PointStatus.OK and v is not None and i is not None and i > 0]
        measured = ([v for v, _ in keep], [i for _, i in keep])
    fit_v, fit_i, res_v, res_pct, rms, outside = [], [], [], [], None, 0
    if part.params is not None and measured[0]:
        fit_v = list(np.linspace(min(measured[0]), max(measured[0]), points))
        fit_i = [float(part.params.current(v)) for v in fit_v]
        model = np.asarray(part.params.current(np.asarray(measured[0], dtype=float)), dtype=float)
        data = np.asarray(measured[1], dtype=float)
        inside = np.ones(data.size, dtype=bool) if window is None else (
            (data >= window[0] * (1 - 1e-9)) & (data <= window[1] * (1 + 1e-9)))
        outside = int((~inside).sum())
        ok = inside & (model > 0) & np.isfinite(model)
        if ok.any():
            relative = data[ok] / model[ok] - 1.0
            res_v, res_pct = np.asarray(measured[0])[ok].tolist(), (relative * 100.0).tolist()
            rms = float(np.sqrt(np.mean(relative ** 2)))
    return {"part": part, "vgs": measured[0], "id": measured[1], "fit_vgs": fit_v, "fit_id": fit_i,
            "residual_vgs": res_v, "residual_pct": res_pct, "rms_relative_residual": rms, "outside_window": outside}


__all__ = ["AcceptanceWindow", "HOT_RISE_K", "LabelPattern", "PartHeating", "PartVerdict", "abort", "bench_summary",
           "judge", "leakage_of", "library_rows", "load_next_sim_part", "output_states", "part_curve", "part_heating",
           "store"]
