"""Plausibility bounds of the figures a person types for design work (shared, pure: no numpy).

A figure outside these bounds is a typing slip (1e300 A, a threshold of 1000 V), never a part: it is refused with one
clear error before anything is computed, so no overflow, no hang and no design built on it. The bounds are far outside
any discrete MOSFET so no real part is refused.
"""

from __future__ import annotations

import math

from benchlab.errors import InputError

# The largest drain current of a design, a matched set, a bin or a stored gm. The largest discrete MOSFETs are rated a
# few hundred amperes continuous (from memory); 1 kA is above every one of them, and far below where the curves
# overflow (1e300 A made the matcher overflow and the sink designer hang).
MAX_OPERATING_CURRENT_A = 1000.0
# Gate-source voltage: discrete MOSFETs are rated +/-20 V, a few +/-30 V (from memory). A threshold above that
# cannot be reached without breaking the gate, so a hand-entered threshold is at most this much.
MAX_GATE_V = 30.0
# KP = gm^2 / (2 ID): the largest discrete parts reach a few hundred A/V of gm at a hundred amperes, a few hundred
# A/V^2 (from memory). 1e4 is well above them; 1e300 made the sink designer divide by zero.
MAX_KP_A_PER_V2 = 1.0e4
MAX_GM_A_PER_V = 1.0e4
# A thermal step for matching warm parts: a junction is rated 150 to 175 degC at most (from memory), so 300 K above
# the sweep's temperature is past every part; 1e300 K drove KP to 0 and ended the matcher with a traceback.
MAX_WARM_K = 300.0


def check_operating_current(current: float, what: str = "the operating current") -> float:
    """``current`` as a float when it is a positive current up to :data:`MAX_OPERATING_CURRENT_A`.

    Raises
    ------
    InputError
        Naming ``what`` and the value, when it is not a number, not finite, not above 0 or above the bound.
    """
    try:
        value = float(current)
    except (TypeError, ValueError):
        value = math.nan
    if not (math.isfinite(value) and 0 < value <= MAX_OPERATING_CURRENT_A):
        raise InputError(f"{what} must be above 0 A and at most {MAX_OPERATING_CURRENT_A:g} A (got {current!r})")
    return value


def check_at_most(value: float, bound: float, what: str, unit: str) -> float:
    """``value`` when it is a finite number from 0 up to ``bound``; else an InputError naming ``what``."""
    number = float(value)
    if not (math.isfinite(number) and 0 <= number <= bound):
        raise InputError(f"{what} must be from 0 to {bound:g} {unit} (got {value!r})")
    return number


# The current a power MOSFET's datasheet gives its VGS(th) at (250 uA, common practice): a typed curve must reach it
# within the gate rating, or it describes no part that could be used.
REACH_CURRENT_A = 250e-6


def check_typed_curve(params, what: str) -> None:
    """Refuse a typed curve (``parts add``, ``--ref-model``) no discrete N-channel MOSFET has.

    ``params`` is a :class:`benchlab.models.DeviceParams`; its threshold must be above 0 and at most
    :data:`MAX_GATE_V`, KP at most :data:`MAX_KP_A_PER_V2`, gm at most :data:`MAX_GM_A_PER_V`, and the curve must
    reach :data:`REACH_CURRENT_A` at a gate voltage within :data:`MAX_GATE_V`.

    Raises
    ------
    InputError
        Naming ``what`` and the first figure out of bounds.
    """
    if not 0 < params.vth <= MAX_GATE_V:
        raise InputError(f"{what}: the threshold must be above 0 V (its magnitude) and at most {MAX_GATE_V:g} V, "
                         f"the gate rating of discrete MOSFETs (got {params.vth:g} V)")
    if params.kp is not None and params.kp > MAX_KP_A_PER_V2:
        raise InputError(f"{what}: KP must be at most {MAX_KP_A_PER_V2:g} A/V^2 (got {params.kp:g})")
    if params.gm is not None and params.gm > MAX_GM_A_PER_V:
        raise InputError(f"{what}: gm must be at most {MAX_GM_A_PER_V:g} A/V (got {params.gm:g})")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a curve too weak to reach the current overflows here
        vgs = float(params.vgs_at(REACH_CURRENT_A))
    if not (math.isfinite(vgs) and vgs <= MAX_GATE_V):
        raise InputError(f"{what}: this curve needs more than {MAX_GATE_V:g} V of gate drive to carry "
                         f"{REACH_CURRENT_A * 1e6:g} uA, beyond the gate rating of discrete MOSFETs")


# The temperatures a bench works at, in kelvin: the fitter's own range (150 to 600 K, benchlab/extract), so that a
# session's recorded ambient can always be fitted; a sweep given 1e300 degC wrote a session no fit or import could use.
MIN_BENCH_K, MAX_BENCH_K = 150.0, 600.0


def check_ambient_c(value: float, what: str = "--ambient") -> float:
    """``value`` (degC) when it is a bench temperature (150 to 600 K); else an InputError naming ``what``."""
    kelvin = float(value) + 273.15
    if not (math.isfinite(kelvin) and MIN_BENCH_K <= kelvin <= MAX_BENCH_K):
        raise InputError(f"{what} {value:g} degC is not a bench temperature ({MIN_BENCH_K - 273.15:g} to "
                         f"{MAX_BENCH_K - 273.15:g} degC)")
    return float(value)
