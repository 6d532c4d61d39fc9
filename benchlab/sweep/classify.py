"""Judge a swept part from its points: good, open, shorted, leaky or unstable, with the reason in words.

Pure functions on the measured points. The rules are deliberately simple and each one names what
it saw, so a technician can check the verdict against the CSV.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Sequence

from benchlab.sweep.records import SweepPoint, vgs_at_current
from benchlab.kinds import Fixture, PartClass, PointStatus
from benchlab.units import format_si

CLASSES = tuple(c for c in PartClass if c is not PartClass.INTERRUPTED)  # what classify() can say

# A diode-connected enhancement MOSFET cannot carry a real current with almost no voltage across
# it: its threshold sits well above this (power parts: about 1-4 V, common practice).
SHORT_VGS_V = 0.3
# Far below threshold a healthy part carries next to nothing (datasheet IDSS / IGSS are in the
# nA-uA range, common practice); "far below" is this fraction of VGS at the reference current.
LEAK_VGS_FRACTION = 0.5
UNSETTLED_FRACTION = 0.15


@dataclass(frozen=True)
class Classification:
    """A part's verdict."""

    kind: PartClass
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def classify(points: Sequence[SweepPoint], *, detect_current_a: float, leak_current_a: float,
             reference_current_a: float = 250e-6, failure: str | None = None,
             fixture: str = Fixture.RESISTOR) -> Classification:
    """Classify a part from its sweep.

    Parameters
    ----------
    points : sequence of SweepPoint
        Every point of the sweep (up and down).
    detect_current_a : float
        Below this current the part counts as not conducting (A).
    leak_current_a : float
        A current this large far below threshold makes the part leaky (A).
    reference_current_a : float
        Current at which VGS is quoted (A).
    failure : str, optional
        A failure the engine saw during the sweep (e.g. "failed open at point 12"); wins over the rules.
    fixture : str
        ``resistor`` or ``smu`` (only changes the wording).

    Returns
    -------
    Classification
    """
    if failure:
        kind = (PartClass.SHORTED if "short" in failure else PartClass.OPEN if "open" in failure
                else PartClass.UNSTABLE)
        return Classification(kind, failure)
    usable = [p for p in points if p.usable]
    if not usable:
        return Classification(PartClass.UNSTABLE, "no usable reading (every reading was over range or not a number)")
    carrying = [p for p in usable if p.id >= detect_current_a]  # compliance points included: a short hits it
    if carrying:
        peak = max(carrying, key=lambda p: p.id)
        if peak.vgs < SHORT_VGS_V:
            return Classification(PartClass.SHORTED, f"carries {format_si(peak.id, 'A')} with only {peak.vgs * 1e3:.0f} mV across "
                                             f"it: drain-source short")
    conducting = [p for p in carrying if p.status != PointStatus.COMPLIANCE]
    if not conducting:
        top = max(usable, key=lambda p: p.vgs)
        if fixture == Fixture.SMU and any(p.status == PointStatus.COMPLIANCE for p in usable):
            return Classification(PartClass.OPEN, f"hit the voltage compliance ({top.vgs:.2f} V) without carrying the "
                                          f"forced current: no conduction path")
        return Classification(PartClass.OPEN, f"no current above {format_si(detect_current_a, 'A')} with up to "
                                      f"{top.vgs:.2f} V across the part")
    peak = max(conducting, key=lambda p: p.id)
    unsettled = [p for p in usable if p.status == PointStatus.UNSETTLED]
    if unsettled and len(unsettled) >= max(2, UNSETTLED_FRACTION * len(usable)):
        spread = max(abs(p.spread_v) for p in unsettled)
        return Classification(PartClass.UNSTABLE, f"readings did not settle at {len(unsettled)} of {len(usable)} points "
                                          f"(VGS moved up to {spread * 1e3:.1f} mV between repeated readings)")
    vref = vgs_at_current(points, reference_current_a, detect_current_a)
    onset = min(conducting, key=lambda p: p.vgs)
    scale_v = vref if vref is not None else onset.vgs
    low = [p for p in usable if p.direction == "up" and p.vgs <= LEAK_VGS_FRACTION * scale_v and p.vgs > 0]
    if low:
        worst = max(low, key=lambda p: p.id)
        if worst.id >= max(leak_current_a, detect_current_a):  # nothing below the bench's floor counts
            # scale_v is where the part reaches the reference current (or starts to conduct): with a leak
            # that point says little about the threshold, so the message names it for what it is
            where = (f"where it reaches {format_si(reference_current_a, 'A')}" if vref is not None
                     else "where it starts to conduct")
            return Classification(PartClass.LEAKY, f"carries {format_si(worst.id, 'A')} at {worst.vgs:.2f} V, a small fraction "
                                           f"of the {scale_v:.2f} V {where}: a leakage path, not channel current")
    if vref is not None:
        return Classification(PartClass.GOOD, f"conducts normally from about {onset.vgs:.2f} V up to {format_si(peak.id, 'A')} "
                                      f"at {peak.vgs:.2f} V; no leakage or unsettled readings")
    return Classification(PartClass.GOOD, f"conducts normally up to {format_si(peak.id, 'A')} at {peak.vgs:.3f} V "
                                  f"({format_si(reference_current_a, 'A')} not bracketed)")
