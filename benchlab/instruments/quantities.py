"""Reading quantities with units from config files: ``12``, ``"12 V"``, ``"500 mA"``, ``"1 %"``.

A bare number is taken in the key's SI unit; a string must carry that unit (with an optional
SI prefix), so a value written in the wrong unit is refused instead of misread.
"""

from __future__ import annotations

import re

_PREFIXES = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6}
# Accepted spellings of each unit, the canonical one first.
UNIT_SPELLINGS = {
    "V": ("V",),
    "A": ("A",),
    "W": ("W",),
    "s": ("s",),
    "ohm": ("ohm", "ohms", "Ω", "Ohm", "R"),
    "%": ("%",),
}
_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$")


def parse_quantity(value: object, unit: str) -> float:
    """Return ``value`` in the SI unit ``unit``.

    Parameters
    ----------
    value : int, float or str
        A number (already in ``unit``) or text like ``"500 mA"``.
    unit : str
        A key of :data:`UNIT_SPELLINGS`; ``"%"`` returns a fraction (``"1 %"`` -> 0.01, a bare
        number is already a fraction).

    Raises
    ------
    ValueError
        With a message naming what was expected, for a wrong type, unit or number.
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ValueError(f"must be a number or text like '1.5 {unit}', got {type(value).__name__}")
    if not isinstance(value, str):
        return float(value)
    match = _QUANTITY.match(value)
    if match is None:
        raise ValueError(f"'{value}' is not a quantity like '1.5 {unit}'")
    number, suffix = float(match.group(1)), match.group(2)
    if unit == "%":
        if suffix == "%":
            return number / 100.0
        if suffix == "":
            return number
        raise ValueError(f"'{value}' has unit '{suffix}', expected a fraction or '%'")
    if suffix == "":
        return number
    for spelling in UNIT_SPELLINGS[unit]:
        if suffix.endswith(spelling):
            prefix = suffix[: -len(spelling)]
            if prefix in _PREFIXES:
                return number * _PREFIXES[prefix]
    raise ValueError(f"'{value}' is not in {unit} (write e.g. '{match.group(1)} {_prefix_of(suffix)}{unit}' or a "
                     f"bare number in {unit})")


def _prefix_of(suffix: str) -> str:
    """The SI prefix of a suffix in another unit (``"mV"`` -> ``"m"``), so a hint keeps the scale the user meant."""
    spellings = {s for names in UNIT_SPELLINGS.values() for s in names}
    for prefix in _PREFIXES:
        if prefix and suffix.startswith(prefix) and suffix[len(prefix):] in spellings:
            return prefix
    return ""
