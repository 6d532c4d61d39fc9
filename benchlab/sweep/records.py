"""Result records of a sweep: measured points, the outcome, and the progress events.

All frozen dataclasses reducing to plain JSON with ``to_dict``; the CLI turns the events into a
progress bar, a terminal UI into a live plot.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from benchlab.kinds import PointStatus
from benchlab.sweepfile import CSV_COLUMNS  # noqa: F401 (the format is defined once, beside its reader)

STATUSES = tuple(PointStatus)


@dataclass(frozen=True)
class SweepPoint:
    """One measured point.

    Parameters
    ----------
    point : int
        0-based index within the sweep (both directions count on).
    time_s : float
        Seconds since the sweep started.
    vgs : float
        Voltage across the diode-connected part (V); ``inf``/``nan`` when the reading was a SCPI special value.
    id : float
        Drain current (A).
    v_source, i_source : float
        What the supply / SMU read back (V, A).
    status : str
        ``ok``, ``over_range``, ``compliance``, ``unsettled`` or ``probe`` (a search reading that
        overshot; the search stepped back and retried finer; kept on disk, not part of the curve).
    direction : str
        ``up`` or ``down``.
    spread_v : float
        Difference between the last two readings of VGS at this point (V); 0 when read once.
    """

    point: int
    time_s: float
    vgs: float
    id: float
    v_source: float
    i_source: float
    status: str = PointStatus.OK
    direction: str = "up"
    spread_v: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @property
    def usable(self) -> bool:
        """True when the reading can be fitted (finite, not over range)."""
        return self.status in (PointStatus.OK, PointStatus.UNSETTLED, PointStatus.COMPLIANCE) and math.isfinite(self.vgs) and math.isfinite(self.id)


@dataclass(frozen=True)
class SweepOutcome:
    """How one part's sweep ended.

    ``complete`` is False when the sweep was interrupted (cancel, Ctrl-C, SIGTERM, an instrument
    error); the points measured before the stop are kept. ``stop_reason`` says in words why the
    engine stopped stepping; ``classification`` / ``reason`` judge the part.
    """

    label: str
    complete: bool
    stop_reason: str
    classification: str
    reason: str
    points: tuple[SweepPoint, ...]
    powered_s: float
    elapsed_s: float
    vgs_at_ref: float | None = None
    reference_current_a: float = 250e-6
    error: str | None = None
    shutdown_problems: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["points"] = [p.to_dict() for p in self.points]
        data["shutdown_problems"] = list(self.shutdown_problems)
        return data

    def summary(self) -> str:
        """One line: label, classification, points, VGS at the reference current."""
        if self.classification not in ("good", None):
            at = "no threshold (not a working transistor)" if self.complete else "not judged"
        else:
            at = (f"VGS={self.vgs_at_ref:.3f} V at {self.reference_current_a * 1e6:g} uA"
                  if self.vgs_at_ref is not None else f"VGS at {self.reference_current_a * 1e6:g} uA not reached")
        state = "" if self.complete else " [INCOMPLETE]"
        return f"{self.label}: {self.classification}, {len(self.points)} points, {at}{state} - {self.reason}"


@dataclass(frozen=True)
class PointMeasured:
    """Progress event: a point was measured and is on disk."""

    label: str
    point: SweepPoint
    count: int  # points measured so far in this sweep
    planned: int  # the plan's target count (adaptive sweeps may take a few more)
    elapsed_s: float
    progress: float = 0.0  # 0-1: how far along (adaptive: log(current) between the first and last target)

    def to_dict(self) -> dict[str, Any]:
        return {"event": "point", "label": self.label, "point": self.point.to_dict(), "count": self.count,
                "planned": self.planned, "elapsed_s": self.elapsed_s, "progress": self.progress}


@dataclass(frozen=True)
class SweepDone:
    """Progress event: the sweep of one part ended (complete or not)."""

    label: str
    complete: bool
    classification: str
    reason: str
    points: int
    elapsed_s: float
    summary: str

    def to_dict(self) -> dict[str, Any]:
        return {"event": "done", **asdict(self)}


@dataclass(frozen=True)
class SweepFault:
    """Progress event: the sweep stopped on an error; the output was switched off."""

    label: str
    message: str
    kind: str  # exception class name
    elapsed_s: float
    shutdown_problems: tuple[str, ...] = ()  # empty when the output was switched off cleanly

    def to_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["shutdown_problems"] = list(self.shutdown_problems)
        return {"event": "fault", **data}


def vgs_at_current(points, current_a: float, floor_a: float = 0.0) -> float | None:
    """VGS (V) at ``current_a`` interpolated in log(current) between the two up-sweep points around it.

    Parameters
    ----------
    points : sequence of SweepPoint
        The sweep's points (only usable up-direction points with ``id > floor_a`` are used).
    current_a : float
        The current (A), e.g. 250e-6 for the datasheet VGS(th).
    floor_a : float
        Points at or below this current are noise, not a curve to interpolate on (A).

    Returns
    -------
    float or None
        None when the data does not bracket the current.
    """
    usable = [p for p in points
              if p.direction == "up" and p.usable and p.status != PointStatus.COMPLIANCE and p.id > max(floor_a, 0.0)]
    if len(usable) < 2:
        return None
    ids = np.array([p.id for p in usable])
    vgs = np.array([p.vgs for p in usable])
    # the first crossing of the current in measurement order (robust to a noisy, non-monotone tail)
    for k in range(1, len(ids)):
        lo, hi = ids[k - 1], ids[k]
        if lo <= current_a <= hi and hi > lo:
            frac = (math.log(current_a) - math.log(lo)) / (math.log(hi) - math.log(lo))
            return float(vgs[k - 1] + frac * (vgs[k] - vgs[k - 1]))
    return None
