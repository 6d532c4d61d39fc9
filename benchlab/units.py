"""Quantities with SI prefixes and units: the one parser and the one formatter of the project.

Every command line option that takes a quantity, the bench files and the reports use these two
functions, so ``20m``, ``20mA``, ``20 mA`` and ``0.02`` mean the same current everywhere and
every printed current reads like ``8.09 mA``.

Rules (prefixes and symbols after the BIPM SI Brochure, 9th ed., 2019, tables 7 and 8):

- a bare number is taken in the quantity's SI unit: ``0.02`` for a current is 20 mA;
- a number may carry an SI prefix (``p n u µ m k M G``, case-sensitive: ``m`` is milli,
  ``M`` mega, ``K`` is refused because kilo is ``k``), a unit, or both: ``20m``, ``20mA``, ``20 mA``;
- a unit other than the expected one is refused with a hint that keeps the prefix typed
  (``500 mV`` for a current suggests ``500 mA``);
- a fraction (unit ``"%"``) is a bare number (``0.01``) or a percentage (``1 %``);
- temperatures (unit ``"degC"``) are in degrees Celsius, written ``25``, ``25 C``, ``25 degC`` or ``25 °C``.
"""

from __future__ import annotations

import math
import re

from benchlab.names import printable

PREFIXES: dict[str, float] = {
    "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6, "G": 1e9,
}
# Accepted spellings of each unit, the canonical one first.
UNIT_SPELLINGS: dict[str, tuple[str, ...]] = {
    "V": ("V",),
    "A": ("A",),
    "W": ("W",),
    "s": ("s",),
    "Hz": ("Hz",),
    "ohm": ("ohm", "ohms", "Ohm", "Ω", "R"),
    "%": ("%",),
    "": (),
    "degC": ("degC", "°C", "C"),
    "K": ("K",),  # a temperature difference
    "A/V": ("A/V", "S"),
    "A/V2": ("A/V2", "A/V^2", "A/V²"),
    "1/V": ("1/V",),
    "V/K": ("V/K",),
    "K/W": ("K/W",),
}
# Units written without a prefix (a prefix on them would read as another unit or make no sense).
_NO_PREFIX = {"%", "degC"}
_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$")


def parse_quantity(value: object, unit: str) -> float:
    """Return ``value`` in the SI unit ``unit``.

    Parameters
    ----------
    value : int, float or str
        A number (already in ``unit``) or text like ``"500 mA"``, ``"500m"``, ``"0.5"``.
    unit : str
        A key of :data:`UNIT_SPELLINGS`. ``"%"`` returns a fraction (``"1 %"`` -> 0.01; a bare
        number is already a fraction), ``""`` is a plain number (an SI prefix is allowed).

    Returns
    -------
    float
        The finite value in ``unit`` (negative values are returned as such; callers refuse them
        where they make no sense, with their own reason).

    Raises
    ------
    ValueError
        With a one-line message naming what was expected, for a wrong type, unit or number.
    """
    example = f"1.5 {unit}" if unit else "1.5"
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ValueError(f"must be a number or text like '{example}', got {type(value).__name__}")
    if not isinstance(value, str):
        number = float(value)
        if not math.isfinite(number):
            raise ValueError(f"must be a finite number, got {value!r}")
        return number
    match = _QUANTITY.match(value)
    echo = printable(value, 60)  # the value as typed, on one line (a newline or NUL shown as an escape)
    if match is None and value.strip().lstrip("+-").lower() in ("nan", "inf", "infinity"):
        raise ValueError(f"'{echo}' is not a finite number")
    if match is None:
        raise ValueError(f"'{echo}' is not a quantity like '{example}'")
    number, suffix = float(match.group(1)), match.group(2)
    if not math.isfinite(number):
        raise ValueError(f"'{echo}' is not a finite number")
    if suffix == "":
        return number
    if unit == "%":
        if suffix == "%":
            return number / 100.0
        raise ValueError(f"'{echo}' has unit '{suffix}', expected a fraction (0.01) or a percentage (1 %)")
    for spelling in UNIT_SPELLINGS[unit]:
        if suffix.endswith(spelling):
            prefix = suffix[: -len(spelling)]
            if prefix == "" or (prefix in PREFIXES and unit not in _NO_PREFIX):
                return number * PREFIXES[prefix]
    if suffix in PREFIXES and unit not in _NO_PREFIX:
        return number * PREFIXES[suffix]
    if suffix[:1] == "K" and (suffix == "K" or suffix[1:] in UNIT_SPELLINGS[unit]):
        raise ValueError(f"'{echo}': 'K' is not an SI prefix (kilo is 'k': write '{match.group(1)} k{unit}')")
    shown = unit if unit else "a plain number"
    canonical = UNIT_SPELLINGS[unit][0] if UNIT_SPELLINGS[unit] else ""
    hint = f"{match.group(1)} {_prefix_of(suffix)}{canonical}".rstrip()
    raise ValueError(f"'{echo}' is not in {shown} (write e.g. '{hint}'"
                     + (f" or a bare number in {unit})" if unit else ")"))


def _prefix_of(suffix: str) -> str:
    """The SI prefix of a suffix in another unit (``"mV"`` -> ``"m"``), so a hint keeps the scale the user meant."""
    spellings = {s for names in UNIT_SPELLINGS.values() for s in names}
    for prefix in PREFIXES:
        if prefix and suffix.startswith(prefix) and suffix[len(prefix):] in spellings:
            return prefix
    return ""


_FORMAT_PREFIXES = {-12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}


def format_si(value: float | None, unit: str, digits: int = 3) -> str:
    """A value with an SI prefix and its unit: ``0.008085, "A"`` -> ``"8.09 mA"``.

    Parameters
    ----------
    value : float or None
        The value in the SI unit ``unit``; None prints as ``"-"``.
    unit : str
        The unit symbol written after the prefix (``"A"``, ``"V"``, ``"ohm"``, ``"A/V"``...).
    digits : int
        Significant digits (trailing zeros dropped). Rounding picks the prefix, so 0.99996 A
        with 3 digits is ``"1 A"``, never ``"1000 mA"``.

    Returns
    -------
    str
        ``"<number> <prefix><unit>"``; values outside p..G keep an exponent (``"3e-15 A"``).
    """
    if value is None:
        return "-"
    value = float(value)
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    digits = max(1, int(digits))
    mantissa, exponent = f"{value:.{digits - 1}e}".split("e")
    exponent = int(exponent)
    exp3 = (exponent // 3) * 3
    if exp3 not in _FORMAT_PREFIXES:
        return f"{value:.{digits}g} {unit}"
    scaled = float(mantissa) * 10 ** (exponent - exp3)
    decimals = max(0, digits - 1 - (exponent - exp3))
    text = f"{scaled:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return f"{text} {_FORMAT_PREFIXES[exp3]}{unit}"
