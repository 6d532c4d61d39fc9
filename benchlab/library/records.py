"""Plain records the device library hands out: frozen dataclasses that reduce to plain JSON."""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any

from benchlab.choices import PART_STATES
from benchlab.models import DeviceParams

POLARITIES = ("N", "P")


def utc_now() -> str:
    """ISO-8601 UTC timestamp, second resolution."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


def natural_key(text: str) -> tuple:
    """Sort key that puts Q2 before Q10."""
    return tuple(int(p) if p.isdecimal() else p.lower() for p in re.split(r"(\d+)", text))


def json_default(value: Any) -> Any:
    """``json.dumps`` fallback: numpy scalars/arrays, tuples and objects with ``to_dict``."""
    if hasattr(value, "to_dict"):
        return value.to_dict()
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, (set, frozenset)):
        return sorted(value)
    raise TypeError(f"cannot store {type(value).__name__} as JSON")


def _strict(value: Any) -> Any:
    # JSON has no inf / NaN: stored (and exported) as null
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _strict(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_strict(v) for v in value]
    return value


def to_json(value: Any) -> str:
    """Compact, strict JSON text for a database column (non-finite numbers become null)."""
    plain = json.loads(json.dumps(value, default=json_default))
    return json.dumps(_strict(plain), sort_keys=True, separators=(",", ":"), allow_nan=False)


def finite_or_none(value: Any) -> float | None:
    """A float, or None for missing / infinite / NaN readings (JSON has no inf or NaN)."""
    if value is None:
        return None
    number = float(value)
    return number if math.isfinite(number) else None


@dataclass(frozen=True)
class PartRecord:
    """One part of the library with its latest curve.

    Parameters
    ----------
    id : int
        Database id (stable within one library file only).
    lot, label : str
        The lot (bag) and the part's label, unique within the lot.
    polarity : str
        ``N`` or ``P``.
    state : str
        ``in_stock``, ``reserved``, ``used`` or ``rejected``.
    reason : str or None
        Why the part was rejected (or the note of its last state change).
    package, notes : str
        Free text.
    params : DeviceParams or None
        The latest fit or the hand-entered curve; None for parts never fitted.
    stderr : dict
        Standard errors of that fit, keyed like ``params``.
    flags : tuple of str
        Warnings the fitter raised on that fit.
    fit_id : int or None
        Database id of that fit.
    classification : str or None
        The sweep's verdict (good, open, shorted, leaky, unstable), None for hand-entered parts.
    operating_current : float or None
        The part's own operating current (A); None: the library's default applies.
    vgs_ref : float or None
        VGS (V) of the current curve at 250 uA, stored with the fit (None when not computed).
    gm_op, gm_current : float or None
        gm (A/V) of the current curve stored at ``gm_current`` (A): the part's operating current or the
        library's default (None when not computed).
    """

    id: int
    lot: str
    label: str
    polarity: str = "N"
    state: str = "in_stock"
    reason: str | None = None
    package: str = ""
    notes: str = ""
    params: DeviceParams | None = None
    stderr: dict = field(default_factory=dict)
    flags: tuple = ()
    fit_id: int | None = None
    classification: str | None = None
    operating_current: float | None = None
    vgs_ref: float | None = None
    gm_op: float | None = None
    gm_current: float | None = None

    @property
    def spec(self) -> str:
        """``LOT/LABEL``: the unambiguous way to name the part on the command line."""
        return f"{self.lot}/{self.label}"

    def to_dict(self) -> dict[str, Any]:
        return {
            "id": self.id, "lot": self.lot, "label": self.label, "polarity": self.polarity,
            "state": self.state, "reason": self.reason, "package": self.package, "notes": self.notes,
            "params": self.params.to_dict() if self.params else None, "stderr": dict(self.stderr),
            "flags": list(self.flags), "fit_id": self.fit_id, "classification": self.classification,
            "operating_current": self.operating_current, "vgs_ref": self.vgs_ref, "gm_op": self.gm_op,
            "gm_current": self.gm_current,
        }


@dataclass(frozen=True)
class ImportedSweep:
    """Outcome of importing one sweep: which part, its verdict, and what happened to it."""

    lot: str
    label: str
    classification: str | None
    action: str  # "fitted", "rejected", "stored" (no fit possible), "skipped" (already in the library)
    detail: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"lot": self.lot, "label": self.label, "classification": self.classification,
                "action": self.action, "detail": self.detail}


@dataclass(frozen=True)
class ImportSummary:
    """What a session import did, sweep by sweep."""

    sessions: tuple[str, ...]
    sweeps: tuple[ImportedSweep, ...]

    def count(self, action: str) -> int:
        """Number of sweeps that ended with ``action``."""
        return sum(1 for s in self.sweeps if s.action == action)

    @property
    def fitted(self) -> int:
        return self.count("fitted")

    @property
    def rejected(self) -> int:
        return self.count("rejected")

    @property
    def skipped(self) -> int:
        return self.count("skipped")

    def to_dict(self) -> dict[str, Any]:
        return {"sessions": list(self.sessions), "sweeps": [s.to_dict() for s in self.sweeps],
                "fitted": self.fitted, "rejected": self.rejected, "skipped": self.skipped,
                "stored": self.count("stored")}
