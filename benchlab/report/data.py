"""Gather what a lot report shows from the library, as plain data (one consistent read)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from benchlab.errors import LibraryError
from benchlab.library import Library, PartRecord
from benchlab.kinds import PointStatus


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


def collect(lib: Library, lot: str, design_id: int | None = None) -> ReportData:
    """Read the parts of ``lot`` (every state), their sweeps and the design ``design_id`` (when given).

    Raises
    ------
    LibraryError
        When the lot does not exist or holds no parts, or the design is unknown or holds no part of the lot.
    """
    with lib.snapshot():
        parts = lib.parts(lot=lot, state=None)
        if not parts:
            known = ", ".join(l["name"] for l in lib.lots()) or "none"
            raise LibraryError(f"lot '{lot}' has no parts in the library (lots: {known})")
        traces = []
        for part in parts:
            for sweep in lib.sweeps(part):
                # below the detection current a good part was not conducting yet: meter noise, not curve
                floor = sweep.get("detect_current_a") if part.state != "rejected" else None
                points = [(v, i) for v, i, s in zip(sweep["vgs"], sweep["id"], sweep["status"])
                          if s == PointStatus.OK and v is not None and i is not None and math.isfinite(v) and i > 0
                          and (floor is None or i >= floor)]
                if points:
                    traces.append(SweepTrace(part.label, tuple(p[0] for p in points), tuple(p[1] for p in points),
                                             rejected=part.state == "rejected"))
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
    sets = _design_sets(design) if design else ()
    if reference is not None:  # the scatter marks the first part of each set as the reference
        sets = tuple((reference.label, *[x for x in s if x != reference.label]) if reference.label in s else s
                     for s in sets)
    return ReportData(lot=lot, parts=tuple(parts), traces=tuple(traces), design=design, design_sets=sets,
                      reference=reference, library_path=lib.path)
