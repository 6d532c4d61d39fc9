"""Gather what a lot report shows from the library, as plain data (one consistent read)."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from benchlab.errors import LibraryError
from benchlab.extract.thresholds import constant_current_threshold
from benchlab.kinds import PointStatus
from benchlab.library import Library, PartRecord
from benchlab.kinds import PointStatus

CC_CURRENT_A = 250e-6  # VGS at this current is the constant-current threshold (benchlab.extract's default)


@dataclass(frozen=True)
class SweepTrace:
    """The usable points of one stored sweep (status ok, finite, current > 0)."""

    label: str
    vgs: tuple[float, ...]
    id: tuple[float, ...]
    rejected: bool = False


@dataclass(frozen=True)
class ReportData:
    """Everything one report needs: the lot's parts, their sweeps, and optionally one design."""

    lot: str
    parts: tuple[PartRecord, ...]
    traces: tuple[SweepTrace, ...]
    design: dict | None = None
    design_sets: tuple[tuple[str, ...], ...] = ()  # labels of each chosen set, reference first
    reference: PartRecord | None = None
    library_path: str = ""
    extra: dict = field(default_factory=dict)
    sessions: tuple[dict, ...] = ()  # session.json of each session the lot's sweeps came from (when still on disk)
    fitter_versions: tuple[str, ...] = ()
    other_lots: tuple[tuple[str, dict], ...] = ()  # (lot, lot_statistics) of every other lot in the library
    windows: dict = field(default_factory=dict)  # label -> (i_min, i_max) the part's curve was fitted on

    def trace_of(self, label: str) -> SweepTrace | None:
        """The part's latest sweep (None for a hand-entered part)."""
        found = [t for t in self.traces if t.label == label]
        return found[-1] if found else None

    def vgs_at_cc(self, label: str) -> float | None:
        """VGS at 250 uA interpolated in the part's latest sweep (never extrapolated; None without data there)."""
        return vgs_at_cc(self.trace_of(label))


def vgs_at_cc(trace: SweepTrace | None, current: float = CC_CURRENT_A) -> float | None:
    """VGS at ``current`` interpolated in log current through a sweep's points (the fitter's constant-current
    threshold), None when the sweep does not reach it."""
    if trace is None or not trace.id:
        return None
    return constant_current_threshold(trace.vgs, trace.id, current)


def trace_of_sweep(part: PartRecord, sweep: Mapping[str, Any]) -> SweepTrace | None:
    """The points of a stored sweep worth drawing: status ok, finite, conducting (for a good part, at or above
    the plan's detection current: below it the part was not conducting yet)."""
    floor = sweep.get("detect_current_a") if part.state != "rejected" else None
    points = [(v, i) for v, i, s in zip(sweep["vgs"], sweep["id"], sweep["status"])
              if s == PointStatus.OK and v is not None and i is not None and math.isfinite(v) and i > 0
              and (floor is None or i >= floor)]
    if not points:
        return None
    return SweepTrace(part.label, tuple(p[0] for p in points), tuple(p[1] for p in points),
                      rejected=part.state == "rejected")


def part_row(part: PartRecord) -> dict[str, Any]:
    """One part as a flat row (SI units): identity, curve, the stored VGS at 250 uA (``vth_cc``) and gm at the
    part's operating current (``gm`` at ``gm_current``: its own or the library's default), standard errors.

    The report's parts table and ``benchlab.api.parts()`` are both made of these rows; every figure is the one the
    library stored with the part's current fit (``benchlab.library.operating``), None where it was not computed.
    """
    prm = part.params
    row = {"lot": part.lot, "label": part.label, "state": part.state, "classification": part.classification,
           "model": prm.model if prm else None, "vth": prm.vth if prm else None,
           "kp": prm.kp if prm and prm.model != "linear" else None,
           "theta": prm.theta if prm and prm.model in ("theta", "ekv") else None,
           "n": prm.n if prm and prm.model == "ekv" else None,
           "vth_cc": part.vgs_ref, "gm": part.gm_op, "gm_current": part.gm_current if part.gm_op is not None else None,
           "operating_current": part.operating_current}
    for key in ("vth", "kp", "theta", "n", "gm", "vth_cc"):
        value = part.stderr.get(key)
        row[f"{key}_stderr"] = float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None
    row["flags"] = ",".join(part.flags)
    row["reason"] = part.reason
    return row


def lot_statistics(parts: Sequence[PartRecord], vgs_cc: Mapping[str, float | None]) -> dict[str, Any]:
    """Count, yield and mean / sample standard deviation of Vth, KP and VGS at 250 uA over a lot's good parts.

    Yield is the fraction of the lot's parts that are not rejected and have a curve.
    """
    good = [p for p in parts if p.state != "rejected" and p.params is not None]

    def spread(values: list[float]) -> tuple[float | None, float | None]:
        if not values:
            return None, None
        return float(np.mean(values)), (float(np.std(values, ddof=1)) if len(values) > 1 else None)

    vth = spread([p.params.vth for p in good])
    kp = spread([p.params.kp for p in good if p.params.model != "linear"])
    cc = spread([v for p in good if (v := vgs_cc.get(p.label)) is not None])
    return {"parts": len(parts), "good": len(good), "yield": len(good) / len(parts) if parts else None,
            "vth_mean": vth[0], "vth_std": vth[1], "kp_mean": kp[0], "kp_std": kp[1],
            "vth_cc_mean": cc[0], "vth_cc_std": cc[1]}


def _design_sets(design: dict) -> tuple[tuple[str, ...], ...]:
    # a matching result may carry several sets; a sink design is one set (its recorded parts)
    sets = design.get("sets")
    if isinstance(sets, list) and sets and all(isinstance(s, (list, tuple)) for s in sets):
        return tuple(tuple(_label_of(x) for x in s) for s in sets)
    recorded = design.get("recorded_parts") or []
    return (tuple(p["label"] for p in recorded),) if recorded else ()


def _label_of(item: Any) -> str:
    if isinstance(item, dict):
        return str(item.get("label") or item.get("part") or "")
    text = str(item)
    return text.rsplit("/", 1)[-1]


def _session_meta(path: str | None) -> dict | None:
    # the session's own record (operator, ambient, bench, instrument identities), when it is still on disk
    if not path:
        return None
    try:
        data = json.loads((Path(path) / "session.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def collect(lib: Library, lot: str, design_id: int | None = None) -> ReportData:
    """Read the parts of ``lot`` (every state), their sweeps and the design ``design_id`` (when given).

    Raises
    ------
    LibraryError
        When the lot does not exist or holds no parts, or the design is unknown or holds no part of the lot.
    """
    sessions: dict[str, str | None] = {}
    versions: set[str] = set()
    windows: dict[str, tuple[float, float]] = {}
    with lib.snapshot():
        parts = lib.parts(lot=lot, state=None)
        if not parts:
            known = ", ".join(l["name"] for l in lib.lots()) or "none"
            raise LibraryError(f"lot '{lot}' has no parts in the library (lots: {known})")
        traces = []
        for part in parts:
            for sweep in lib.sweeps(part):
                sessions.setdefault(str(sweep.get("session_id") or sweep.get("session_path")), sweep.get("session_path"))
                trace = trace_of_sweep(part, sweep)
                if trace is not None:
                    traces.append(trace)
            if part.fit_id is not None:
                window = lib.fit_window(part.fit_id)
                if window is not None:
                    windows[part.label] = window
                versions.update(str(f["fitter_version"]) for f in lib.fits(part)
                                if f["id"] == part.fit_id and f.get("fitter_version"))
        design = lib.design(design_id) if design_id is not None else None
        reference = None
        if design is not None:
            recorded = design.get("recorded_parts") or []
            lots = sorted({p["lot"] for p in recorded})
            if recorded and lot not in lots:
                # the figures would mark nothing and the page would mix another lot's design in silently
                raise LibraryError(f"design {design_id} uses parts of lot {', '.join(repr(l) for l in lots)}, "
                                   f"none of lot '{lot}'; report on that lot (--lot) or leave out --design")
            ref_name = design.get("ref") or design.get("reference")
            if isinstance(ref_name, dict):
                ref_name = ref_name.get("label") or ref_name.get("part")
            candidates = [f"{p['lot']}/{p['label']}" for p in recorded]
            if ref_name:
                match = [c for c in candidates if c == ref_name or c.rsplit("/", 1)[-1] == _label_of(ref_name)]
                candidates = match or candidates
            if candidates:
                reference = lib.get_part(candidates[0])
        other_lots = []
        for entry in lib.lots():
            if entry["name"] == lot:
                continue
            members = lib.parts(lot=entry["name"], state=None)
            other_lots.append((entry["name"], lot_statistics(members, {p.label: p.vgs_ref for p in members})))
    sets = _design_sets(design) if design else ()
    if reference is not None:  # the scatter marks the first part of each set as the reference
        sets = tuple((reference.label, *[x for x in s if x != reference.label]) if reference.label in s else s
                     for s in sets)
    metas = []
    for session_id, path in sessions.items():
        meta = _session_meta(path)
        metas.append(meta if meta is not None else {"id": session_id, "missing": path})
    return ReportData(lot=lot, parts=tuple(parts), traces=tuple(traces), design=design, design_sets=sets,
                      reference=reference, library_path=lib.path, sessions=tuple(metas),
                      fitter_versions=tuple(sorted(versions)), other_lots=tuple(other_lots), windows=windows)
