"""Checks that say how far a fit can be trusted; each returns (flag, note) pairs or numbers.

Pure functions on the points of one sweep and its fitted curve. The limits below are
our own engineering choices (stated so a user can judge them), not published values.
"""

from __future__ import annotations

import numpy as np

from benchlab.extract.result import (FLAG_AT_BOUND, FLAG_FEW_POINTS, FLAG_HYSTERESIS, FLAG_NARROW_RANGE,
                                     FLAG_NON_MONOTONIC, FLAG_POOR_FIT, FLAG_POWER_DRIFT)
from benchlab.extract.thresholds import constant_current_threshold

MIN_POINTS_ABOVE_THRESHOLD = 5
# decades of current a model needs to pin all its parameters (our choice: one decade
# separates Vth from KP for a square law; THETA needs the bend of a wider range; n needs
# the weak-inversion slope plus the strong-inversion curve)
MIN_DECADES = {"linear": 0.0, "square": 0.7, "theta": 1.2, "ekv": 2.5}
POOR_FIT_RELATIVE_RMS = 0.05
NON_MONOTONIC_DROP = 0.02
HYSTERESIS_LIMIT_V = 5e-3
DRIFT_MIN_POWER_W = 0.05
DRIFT_T_LIMIT = 4.0


def window_checks(model: str, vgs, i_d, vth: float) -> list[tuple[str, str]]:
    """Too few points above threshold, or too narrow a current range for ``model``."""
    found = []
    above = int(np.sum(np.asarray(vgs) > vth))
    if above < MIN_POINTS_ABOVE_THRESHOLD:
        found.append((FLAG_FEW_POINTS, f"only {above} fitted points above the threshold "
                                       f"(want {MIN_POINTS_ABOVE_THRESHOLD} or more)"))
    decades = float(np.log10(np.max(i_d) / np.min(i_d))) if len(i_d) else 0.0
    if decades < MIN_DECADES[model]:
        found.append((FLAG_NARROW_RANGE, f"fitted currents span {decades:.2f} decades; the {model} model "
                                         f"needs about {MIN_DECADES[model]:g}"))
    return found


def fit_quality(rms_relative: float) -> list[tuple[str, str]]:
    """Poor fit when the relative residuals' RMS passes :data:`POOR_FIT_RELATIVE_RMS`."""
    if rms_relative > POOR_FIT_RELATIVE_RMS:
        return [(FLAG_POOR_FIT, f"residuals are {100 * rms_relative:.1f} % RMS of the current "
                                f"(limit {100 * POOR_FIT_RELATIVE_RMS:g} %)")]
    return []


def monotonic_check(vgs, i_d) -> list[tuple[str, str]]:
    """Current falling by more than :data:`NON_MONOTONIC_DROP` while VGS rises, in measurement order."""
    vgs = np.asarray(vgs, dtype=float)
    i_d = np.asarray(i_d, dtype=float)
    drops = np.flatnonzero((i_d[1:] < (1.0 - NON_MONOTONIC_DROP) * i_d[:-1]) & (vgs[1:] > vgs[:-1]))
    if drops.size:
        k = int(drops[0]) + 1
        return [(FLAG_NON_MONOTONIC, f"current falls while VGS rises ({drops.size} place(s), first at "
                                     f"VGS={float(np.asarray(vgs)[k]):.4f} V)")]
    return []


def bound_checks(model: str, theta: float, n: float) -> list[tuple[str, str]]:
    """Parameters resting on their physical bound (THETA = 0, n = 1)."""
    found = []
    if model in ("theta", "ekv") and theta <= 0.0:
        found.append((FLAG_AT_BOUND, "THETA rests at 0: the curve bends upward (heating, or a smaller model "
                                     "fits as well)"))
    if model == "ekv" and n <= 1.0:
        found.append((FLAG_AT_BOUND, "n rests at 1: the data hold no weak-inversion slope"))
    return found


def hysteresis(up_vgs, up_id, down_vgs, down_id) -> float | None:
    """Mean VGS(down) - VGS(up) at equal currents (V), over the currents both passes share.

    Heating during the up pass lowers the threshold, so a hotter down pass needs less VGS
    for the same current: a negative value is the signature of self-heating.
    """
    if len(up_id) < 2 or len(down_id) < 2:
        return None
    lo = max(np.min(up_id), np.min(down_id))
    hi = min(np.max(up_id), np.max(down_id))
    if not hi > lo:
        return None
    probe = np.geomspace(lo, hi, 12)
    order = np.argsort(down_vgs)
    diffs = []
    for current in probe:
        v_up = constant_current_threshold(up_vgs, up_id, current)
        v_down = constant_current_threshold(np.asarray(down_vgs)[order], np.asarray(down_id)[order], current)
        if v_up is not None and v_down is not None:
            diffs.append(v_down - v_up)
    return float(np.mean(diffs)) if diffs else None


def hysteresis_check(shift_v: float | None) -> list[tuple[str, str]]:
    """Flag a shift between the up and down passes beyond :data:`HYSTERESIS_LIMIT_V`."""
    if shift_v is None or abs(shift_v) <= HYSTERESIS_LIMIT_V:
        return []
    why = "the part heated up (threshold fell)" if shift_v < 0 else "drift or charge trapping"
    return [(FLAG_HYSTERESIS, f"down sweep sits {1e3 * shift_v:+.1f} mV from the up sweep at equal current; "
                              f"likely {why}")]


def power_drift_check(vgs, i_d, relative_residuals) -> list[tuple[str, str]]:
    """Residuals that trend with dissipated power VGS*ID: the fitted curve cannot follow a heating part.

    Compares the mean relative residual of the points in the top third of power against the
    middle third (Welch t statistic); only judged when the sweep dissipates at least
    :data:`DRIFT_MIN_POWER_W`, since without power there is no heating.
    """
    power = np.asarray(vgs, dtype=float) * np.asarray(i_d, dtype=float)
    r = np.asarray(relative_residuals, dtype=float)
    if power.size < 9 or power.max() < DRIFT_MIN_POWER_W:
        return []
    order = np.argsort(power)
    third = power.size // 3
    middle, top = r[order[third:2 * third]], r[order[-third:]]
    spread = np.sqrt(middle.var(ddof=1) / middle.size + top.var(ddof=1) / top.size)
    if spread <= 0:
        return []
    t_stat = (top.mean() - middle.mean()) / spread
    if abs(t_stat) > DRIFT_T_LIMIT:
        sign = "more" if t_stat > 0 else "less"
        return [(FLAG_POWER_DRIFT, f"at the highest dissipation (up to {power.max():.3g} W) the part carries "
                                   f"{sign} current than the fitted curve (t={t_stat:.1f}): likely self-heating; "
                                   "use a heat sink or a pulsed sweep")]
    return []
