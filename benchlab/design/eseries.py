"""IEC 60063 preferred values (E-series) and the nearest preferred value on a log scale.

E3 to E24 carry two significant digits and are taken exactly as IEC 60063:2015 lists them
(several of them differ from the rounded geometric formula, e.g. 2.7, 3.0 ... 4.7 and 8.2).
E48, E96 and E192 carry three digits and follow round(100 x 10^(i/N)); the standard lists
one exception in E192 (9.20 where the formula gives 9.19), applied here.
"""

from __future__ import annotations

import math

import numpy as np

from benchlab.choices import SERIES_NAMES
from benchlab.errors import InputError

# IEC 60063:2015, E24 as listed (two significant digits, one decade).
_E24_LISTED = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
               3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)


# Tolerance usually paired with each series (IEC 60063 groups them this way; common practice).
SERIES_TOLERANCE = {"E3": 0.40, "E6": 0.20, "E12": 0.10, "E24": 0.05, "E48": 0.02, "E96": 0.01, "E192": 0.005}


def _formula_decade(steps: int) -> tuple[float, ...]:
    values = [round(100.0 * 10.0 ** (i / steps)) / 100.0 for i in range(steps)]
    if steps == 192:
        # IEC 60063 lists 9.20 in E192 where the formula gives 9.19.
        values = [9.20 if abs(v - 9.19) < 1e-9 else v for v in values]
    return tuple(values)


def series_decade(name: str) -> tuple[float, ...]:
    """The values of one decade of series ``name`` (``"E24"``, ``"E96"`` ...), from 1.0 up to below 10.

    Parameters
    ----------
    name : str
        Series name, case-insensitive: E3, E6, E12, E24, E48, E96 or E192.

    Returns
    -------
    tuple of float
        Ascending mantissas in [1, 10).
    """
    key = str(name).strip().upper()
    if key not in SERIES_NAMES:
        raise InputError(f"unknown E-series '{name}' (expected one of {', '.join(SERIES_NAMES)})")
    if key in ("E3", "E6", "E12", "E24"):
        stride = 24 // int(key[1:])
        return _E24_LISTED[::stride]
    return _formula_decade(int(key[1:]))


def series_tolerance(name: str) -> float:
    """Relative tolerance usually bought with series ``name`` (0.05 for E24, 0.01 for E96)."""
    series_decade(name)  # validates the name
    return SERIES_TOLERANCE[str(name).strip().upper()]


def _check_value(value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise InputError(f"a preferred value needs a positive finite number, got {value}")
    return value


def series_values(name: str, low: float, high: float) -> list[float]:
    """All preferred values of series ``name`` in ``[low, high]`` (inclusive, ascending).

    Values are rounded to the series' significant digits so 4.7 kOhm reads 4700.0, not 4699.999.
    """
    low, high = _check_value(low), _check_value(high)
    decade = series_decade(name)
    digits = 2 if len(decade) <= 24 else 3
    out: list[float] = []
    for exponent in range(math.floor(math.log10(low)) - 1, math.floor(math.log10(high)) + 2):
        for mantissa in decade:
            value = _round_significant(mantissa * 10.0 ** exponent, digits)
            if low * (1 - 1e-12) <= value <= high * (1 + 1e-12):
                out.append(value)
    return out


def _round_significant(value: float, digits: int) -> float:
    exponent = math.floor(math.log10(value))
    return round(value, digits - 1 - exponent)


def nearest_preferred(value: float, name: str = "E24") -> float:
    """Nearest preferred value to ``value`` on a log scale, searching across decade boundaries.

    Parameters
    ----------
    value : float
        Positive target (ohm, farad ...).
    name : str
        Series name (default E24).

    Returns
    -------
    float
        The preferred value with the smallest ``|log(candidate / value)|``; on an exact tie
        the smaller value.
    """
    value = _check_value(value)
    candidates = series_values(name, value / 10.0, value * 10.0)
    logs = np.abs(np.log(np.asarray(candidates) / value))
    return float(candidates[int(np.argmin(logs))])


def preferred_at_least(value: float, name: str = "E24") -> float:
    """Smallest preferred value of series ``name`` that is >= ``value``."""
    value = _check_value(value)
    return next(v for v in series_values(name, value, value * 10.0) if v >= value * (1 - 1e-12))
