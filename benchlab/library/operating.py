"""The operating figures the library stores with each fit: VGS at the 250 uA reference current and gm at the part's
operating current (or the library's default current).

They are computed once, when a fit is stored or an operating current changes, and kept in the ``fits`` row
(``vgs_ref``, ``gm_op``, ``gm_current``), so ``parts list``, the exports, the Python API and the report all show the
same stored numbers. A figure that cannot be computed is NULL, never a placeholder 0.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from benchlab.models import DeviceParams

REFERENCE_CURRENT_A = 250e-6  # VGS(th) of power-MOSFET datasheets at VDS = VGS (common practice, no standard text)
# the library-wide operating current when the library sets none: the reference current itself
BUILTIN_OPERATING_CURRENT_A = REFERENCE_CURRENT_A
SETTING_OPERATING_CURRENT = "operating_current_a"


def _finite(value: Any) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def vgs_at_reference(params: DeviceParams, result: Mapping[str, Any] | None) -> float | None:
    """VGS (V) at 250 uA for a stored fit.

    A fit made on points (its result has a ``window``) gives the measured value: the fitter's constant-current
    threshold, interpolated in the points and never extrapolated (None when the sweep does not reach 250 uA);
    when it was fitted at another constant current, the curve's value if 250 uA lies within the fitted window.
    A curve with no points behind it (entered by hand, or imported without a result) gives the curve's own value.
    """
    result = result or {}
    window = result.get("window") if isinstance(result.get("window"), Mapping) else None
    if window is None:
        return _finite(params.vgs_at(REFERENCE_CURRENT_A))
    cc = _finite(result.get("cc_current"))
    if "vth_cc" in result and (cc is None or math.isclose(cc, REFERENCE_CURRENT_A, rel_tol=1e-9)):
        return _finite(result.get("vth_cc"))
    low, high = _finite(window.get("i_min")), _finite(window.get("i_max"))
    if low is not None and high is not None and low <= REFERENCE_CURRENT_A <= high:
        return _finite(params.vgs_at(REFERENCE_CURRENT_A))
    return None


def gm_at_current(params: DeviceParams, current: float) -> float | None:
    """gm (A/V) of the curve at ``current`` (A): dID/dVGS of the stored model there (``DeviceParams.gm_at``)."""
    if not (current and current > 0):
        return None
    return _finite(params.gm_at(current))
