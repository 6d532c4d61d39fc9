"""Checks that say how far a fit can be trusted.

Pure functions. Most work on many sweeps at once (rows of ``(B, N)`` arrays with a mask) and
return, per sweep, a list of (flag, note) pairs; the hysteresis check takes one sweep. The limits below are
our own engineering choices (stated so a user can judge them), not published values.
"""

from __future__ import annotations

import warnings

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
# a fall must also stand this many standard deviations of a difference of two readings above the
# sweep's current noise floor, else meter noise near the detection floor reads as a fall (our choice:
# on 200 noisy ngspice resistor-line sweeps per fixture the largest noise fall was 5.2 of them; a
# fall that matters, a few % of milliamps, is hundreds)
NON_MONOTONIC_NOISE_SIGMAS = 8.0
MIN_NOISE_SAMPLES = 5
HYSTERESIS_LIMIT_V = 5e-3
DRIFT_MIN_POWER_W = 0.05
DRIFT_T_LIMIT = 4.0
# and the trend must be big enough to matter: 0.5 % of the current, about what 1 K of heating does
# to a part at 1 V overdrive (2 x 2.5 mV/K / 1 V); smaller trends are model detail, not heat
DRIFT_MIN_EFFECT = 0.005


def _rows(count):
    return [[] for _ in range(count)]


def window_checks(model: str, vgs, i_d, mask, vth) -> list[list[tuple[str, str]]]:
    """Per sweep (rows of ``(B, N)`` arrays, ``mask`` marks fitted points): too few points above
    threshold, or too narrow a current range for ``model``."""
    vgs, i_d, mask = np.asarray(vgs, float), np.asarray(i_d, float), np.asarray(mask, bool)
    found = _rows(vgs.shape[0])
    above = (mask & (vgs > np.asarray(vth, float)[:, None])).sum(axis=1)
    i_hi = np.where(mask, i_d, -np.inf).max(axis=1)
    i_lo = np.where(mask, i_d, np.inf).min(axis=1)
    with np.errstate(all="ignore"):
        decades = np.where(mask.any(axis=1), np.log10(i_hi / i_lo), 0.0)
    for row in np.flatnonzero(above < MIN_POINTS_ABOVE_THRESHOLD):
        found[row].append((FLAG_FEW_POINTS, f"only {above[row]} fitted points above the threshold "
                                            f"(want {MIN_POINTS_ABOVE_THRESHOLD} or more)"))
    for row in np.flatnonzero(decades < MIN_DECADES[model]):
        found[row].append((FLAG_NARROW_RANGE, f"fitted currents span {decades[row]:.2f} decades; the {model} "
                                              f"model needs about {MIN_DECADES[model]:g}"))
    return found


def fit_quality(rms_relative) -> list[list[tuple[str, str]]]:
    """Poor fit where the relative residuals' RMS passes :data:`POOR_FIT_RELATIVE_RMS`."""
    rms_relative = np.atleast_1d(np.asarray(rms_relative, float))
    found = _rows(rms_relative.size)
    for row in np.flatnonzero(rms_relative > POOR_FIT_RELATIVE_RMS):
        found[row].append((FLAG_POOR_FIT, f"residuals are {100 * rms_relative[row]:.1f} % RMS of the current "
                                          f"(limit {100 * POOR_FIT_RELATIVE_RMS:g} %)"))
    return found


def current_noise_floor(i_d, valid) -> np.ndarray:
    """Absolute noise (A) of the current readings of each sweep, from its lower-current half.

    From second differences d2 in measurement order: for independent noise of standard
    deviation s they scatter as N(c, 6 s^2) around the curve's own curvature c, which is
    positive on a rising, bending curve. Only the negative d2 are used (noise alone can make
    them; a convex curve only makes them rarer, so s comes out low, never high), by their median:
    s = median |d2 < 0| / (0.6745 sqrt 6). At least :data:`MIN_NOISE_SAMPLES` of them are needed,
    so one real dip (which makes one or two) cannot hide itself; else 0. Rows of a rising pass,
    ``valid`` marks real points.
    """
    i_d, valid = np.asarray(i_d, float), np.asarray(valid, bool)
    rows = i_d.shape[0]
    if i_d.shape[1] < 3:
        return np.zeros(rows)
    count = valid.sum(axis=1)
    d2 = i_d[:, 2:] - 2.0 * i_d[:, 1:-1] + i_d[:, :-2]
    centre = np.arange(1, i_d.shape[1] - 1)[None, :]
    negative = valid[:, 2:] & (centre < (count[:, None] // 2)) & (d2 < 0)
    enough = negative.sum(axis=1) >= MIN_NOISE_SAMPLES
    if not enough.any():
        return np.zeros(rows)
    with warnings.catch_warnings():  # rows without samples give NaN, replaced below
        warnings.simplefilter("ignore", RuntimeWarning)
        median = np.nanmedian(np.where(negative, -d2, np.nan), axis=1)
    return np.where(enough & np.isfinite(median), median / (0.6745 * np.sqrt(6.0)), 0.0)


def monotonic_check(vgs, i_d, valid) -> list[list[tuple[str, str]]]:
    """Current falling by more than :data:`NON_MONOTONIC_DROP` while VGS rises, in measurement order
    (rows of a rising pass; ``valid`` marks real points, padding at the end).

    A fall must also exceed :data:`NON_MONOTONIC_NOISE_SIGMAS` standard deviations of the
    difference of two readings (:func:`current_noise_floor` x sqrt 2), so readings near the
    noise floor that jitter by more than 2 % are not taken for a falling current.
    """
    vgs, i_d, valid = np.asarray(vgs, float), np.asarray(i_d, float), np.asarray(valid, bool)
    found = _rows(vgs.shape[0])
    pairs = valid[:, 1:] & valid[:, :-1]
    noise = NON_MONOTONIC_NOISE_SIGMAS * np.sqrt(2.0) * current_noise_floor(i_d, valid)[:, None]
    fall = i_d[:, :-1] - i_d[:, 1:]
    drops = pairs & (fall > NON_MONOTONIC_DROP * i_d[:, :-1]) & (fall > noise) & (vgs[:, 1:] > vgs[:, :-1])
    counts = drops.sum(axis=1)
    for row in np.flatnonzero(counts):
        k = int(np.argmax(drops[row])) + 1
        found[row].append((FLAG_NON_MONOTONIC, f"current falls while VGS rises ({counts[row]} place(s), first "
                                               f"at VGS={vgs[row, k]:.4f} V)"))
    return found


def bound_checks(model: str, theta, n) -> list[list[tuple[str, str]]]:
    """Parameters resting on their physical bound (THETA = 0, n = 1)."""
    theta, n = np.atleast_1d(np.asarray(theta, float)), np.atleast_1d(np.asarray(n, float))
    found = _rows(theta.size)
    if model in ("theta", "ekv"):
        for row in np.flatnonzero(theta <= 0.0):
            found[row].append((FLAG_AT_BOUND, "THETA rests at 0: the curve bends upward (heating, or a smaller "
                                              "model fits as well)"))
    if model == "ekv":
        for row in np.flatnonzero(n <= 1.0):
            found[row].append((FLAG_AT_BOUND, "n rests at 1: the data hold no weak-inversion slope"))
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


def power_drift_check(vgs, i_d, mask, relative_residuals) -> list[list[tuple[str, str]]]:
    """Residuals that trend with dissipated power VGS*ID: the fitted curve cannot follow a heating part.

    Compares the mean relative residual of the fitted points in the top third of power against
    the middle third (Welch t statistic); only judged when a sweep dissipates at least
    :data:`DRIFT_MIN_POWER_W`, since without power there is no heating, and only flagged when
    the difference also exceeds :data:`DRIFT_MIN_EFFECT` (a quiet sweep makes a tiny model
    mismatch statistically significant without any heat). Rows of ``(B, N)`` arrays.
    """
    mask = np.asarray(mask, bool)
    power = np.where(mask, np.asarray(vgs, float) * np.asarray(i_d, float), -np.inf)
    r = np.asarray(relative_residuals, float)
    found = _rows(mask.shape[0])
    count = mask.sum(axis=1)
    rank = np.argsort(np.argsort(np.where(mask, power, np.inf), axis=1, kind="stable"), axis=1)
    third = (count // 3)[:, None]
    middle = mask & (rank >= third) & (rank < 2 * third)
    top = mask & (rank >= count[:, None] - third)

    def mean_var(sel):
        k = sel.sum(axis=1)
        mean = np.where(sel, r, 0.0).sum(axis=1) / np.maximum(k, 1)
        var = np.where(sel, (r - mean[:, None]) ** 2, 0.0).sum(axis=1) / np.maximum(k - 1, 1)
        return mean, var, np.maximum(k, 1)

    m_mid, v_mid, k_mid = mean_var(middle)
    m_top, v_top, k_top = mean_var(top)
    spread = np.sqrt(v_mid / k_mid + v_top / k_top)
    with np.errstate(all="ignore"):
        t_stat = np.where(spread > 0, (m_top - m_mid) / spread, 0.0)
    p_max = power.max(axis=1)
    judged = (count >= 9) & (p_max >= DRIFT_MIN_POWER_W)
    big = np.abs(m_top - m_mid) > DRIFT_MIN_EFFECT
    for row in np.flatnonzero(judged & big & (np.abs(t_stat) > DRIFT_T_LIMIT)):
        # residuals are fitted / measured - 1: negative at the top means the part carries more
        sign = "less" if t_stat[row] > 0 else "more"
        found[row].append((FLAG_POWER_DRIFT, f"at the highest dissipation (up to {p_max[row]:.3g} W) the part "
                                             f"carries {sign} current than the fitted curve (t={t_stat[row]:.1f}): "
                                             "likely self-heating; use a heat sink or a pulsed sweep"))
    return found
