"""The small closed vocabularies of a sweep as enums: part class, point status, fixture, sweep mode.

They are :class:`enum.StrEnum`, so a member equals its string value, writes to CSV / JSON as that
value and the files on disk are unchanged; code compares against members, never bare strings, and
the terminal UI displays and tests against them. Values read back from files are turned into
members with ``PartClass.parse(text)`` (unknown or missing values give ``None``).
"""

from __future__ import annotations

from enum import StrEnum


class PartClass(StrEnum):
    """A swept part's verdict. Only ``GOOD`` is fit for use; ``INTERRUPTED`` (the sweep stopped before
    the part could be judged) is never a dud: the part may be fine and should be swept again."""

    GOOD = "good"
    OPEN = "open"
    SHORTED = "shorted"
    LEAKY = "leaky"
    UNSTABLE = "unstable"
    INTERRUPTED = "interrupted"

    @property
    def is_dud(self) -> bool:
        """True for a part judged unusable (open, shorted, leaky, unstable)."""
        return self not in (PartClass.GOOD, PartClass.INTERRUPTED)

    @classmethod
    def parse(cls, value: object) -> "PartClass | None":
        """The member for ``value`` (a string read from a file), ``None`` when missing or unknown."""
        try:
            return cls(value) if value is not None else None
        except ValueError:
            return None


class PointStatus(StrEnum):
    """What a measured point is worth (the ``status`` column of a session CSV)."""

    OK = "ok"
    OVER_RANGE = "over_range"
    COMPLIANCE = "compliance"
    UNSETTLED = "unsettled"
    PROBE = "probe"  # a search reading that overshot; kept on disk, not part of the curve


class Fixture(StrEnum):
    """How the part is wired: a supply through a series resistor with a meter, or a source-measure unit."""

    RESISTOR = "resistor"
    SMU = "smu"


class SweepMode(StrEnum):
    """How the setpoints of a sweep are chosen."""

    TARGETS = "targets"  # log-spaced target currents, adaptive
    VOLTAGES = "voltages"  # an explicit list of source voltages
    CURRENTS = "currents"  # the SMU forcing log-spaced currents


class SourceFunction(StrEnum):
    """What a source-measure unit forces."""

    VOLTAGE = "voltage"
    CURRENT = "current"


__all__ = ["Fixture", "PartClass", "PointStatus", "SourceFunction", "SweepMode"]
