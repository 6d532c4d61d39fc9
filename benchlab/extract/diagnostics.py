"""Checks that say how far a fit can be trusted.

Pure functions. Most work on many sweeps at once (rows of ``(B, N)`` arrays with a mask) and
return, per sweep, a list of (flag, note) pairs; the hysteresis check takes one sweep. The limits below are
our own engineering choices (stated so a user can judge them), not published values.
"""

from __future__ import annotations


import numpy as np

from benchlab.extract.engine import row_median
from benchlab.extract.result import (FLAG_AT_BOUND, FLAG_FEW_POINTS, FLAG_HYSTERESIS, FLAG_NARROW_RANGE,
                                     FLAG_NON_MONOTONIC, FLAG_POOR_FIT, FLAG_POWER_DRIFT)
from benchlab.extract.thresholds import constant_current_threshold

MIN_POINTS_ABOVE_THRESHOLD = 5
# decades of current a model needs to pin all its parameters (our choice: one decade
# separates Vth from KP for a square law; THETA needs the bend of a wider range; n needs
# the weak-inversion slope plus the strong-inversion curve)
MIN_DECADES = {"linear": 0.0, "square": 0.7, "theta": 1.2, "ekv": 2.5}
POOR_FIT_RELATIVE_RMS = 0.05
# THETA's effect on the current at the top of the fitted window, THETA Vov / (1 + THETA Vov), below which
# its standard error is not judged against THETA's own size (our choice: the poor-fit limit, a bend the
# fit could miss and still count as good; assemble.poorly_determined)
THETA_EFFECT_FLOOR = POOR_FIT_RELATIVE_RMS
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
    median = row_median(-d2, negative)  # NaN for rows without samples, replaced below
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


# the part's own temperature sensitivity (1/I) dI/dT = (gm/I) |dVth/dT| - M/T: threshold falls by
# about 5 mV/K (datasheets span -2 to -8 mV/K, common practice) and KP falls as T^-1.5 (the SPICE
# level-1 mobility exponent); near 1 V overdrive the two nearly cancel
VTH_TEMPCO_V_PER_K = 5e-3
MOBILITY_EXPONENT = 1.5
DRIFT_MIN_KELVIN = 2.0  # the heating the residuals imply at the top power must reach this
DRIFT_MIN_R2 = 0.8  # and the heating law must explain most of what the fit leaves (a mismatch has its own shape)


def power_drift_check(vgs, i_d, mask, relative_residuals, gm_over_id=None,
                      temperature_k: float = 300.15, jacobian=None) -> list[list[tuple[str, str]]]:
    """Residuals that follow what heating does to this part: the fitted curve cannot follow a warming part.

    A part warmed by dT = Rth P (P = VGS ID) carries ID (1 + s dT), with s = (1/I) dI/dT from the fitted
    model at each point (``gm_over_id`` x :data:`VTH_TEMPCO_V_PER_K` - :data:`MOBILITY_EXPONENT` / T;
    positive below the zero-temperature-coefficient overdrive, negative above). The relative residuals
    r = fitted / measured - 1 are regressed on x = s P: heating makes r = -Rth x. Flagged when the
    implied Rth is positive by more than :data:`DRIFT_T_LIMIT` standard errors, warms the part by at
    least :data:`DRIFT_MIN_KELVIN` at the top power, the law explains at least :data:`DRIFT_MIN_R2` of
    the residuals' variance (a model mismatch has its own shape), and the sweep dissipates at least
    :data:`DRIFT_MIN_POWER_W`. Rows of ``(B, N)`` arrays.
    """
    mask = np.asarray(mask, bool)
    vgs, i_d = np.asarray(vgs, float), np.asarray(i_d, float)
    r = np.where(mask, np.asarray(relative_residuals, float), 0.0)
    found = _rows(mask.shape[0])
    power = np.where(mask, vgs * i_d, 0.0)
    if gm_over_id is None:  # without a model: a square law's 2 / Vov is not known; use the power alone
        sensitivity = np.ones_like(power)
    else:
        sensitivity = np.asarray(gm_over_id, float) * VTH_TEMPCO_V_PER_K - MOBILITY_EXPONENT / temperature_k
    x = np.where(mask, sensitivity * power, 0.0)
    count = mask.sum(axis=1)
    # design [1 (or the Jacobian), x]: x's coefficient is what the fitted parameters cannot take up
    others = [np.where(mask, 1.0, 0.0)] if jacobian is None else [np.where(mask, c, 0.0) for c in jacobian]
    design = np.stack(others + [x], axis=-1)
    scale = np.sqrt(np.einsum("bnp,bnp->bp", design, design))
    scale = np.where(scale > 0, scale, 1.0)
    design = design / scale[:, None, :]
    n_par = design.shape[-1]
    normal = np.einsum("bnp,bnq->bpq", design, design) + 1e-12 * np.eye(n_par)
    inverse = np.linalg.pinv(normal)
    projected = np.einsum("bnp,bn->bp", design, r)  # design^T r
    coef = np.einsum("bpq,bq->bp", inverse, projected)
    total = np.einsum("bn,bn->b", r, r)
    rss = np.maximum(total - np.einsum("bp,bp->b", coef, projected), 0.0)
    # the residual sum without x: r projected on the other columns alone
    inv0 = np.linalg.pinv(normal[:, :-1, :-1])
    c0 = np.einsum("bpq,bq->bp", inv0, projected[:, :-1])
    rss0 = np.maximum(total - np.einsum("bp,bp->b", c0, projected[:, :-1]), 0.0)
    with np.errstate(all="ignore"):
        slope = coef[:, -1] / scale[:, -1]
        se = np.sqrt(rss / np.maximum(count - n_par, 1) * np.abs(inverse[:, -1, -1])) / scale[:, -1]
        t_stat = np.where(se > 0, -slope / se, 0.0)
        r2 = np.where(rss0 > 0, 1.0 - rss / rss0, 0.0)  # share of what is left that heating explains
    rth = -slope
    p_max = power.max(axis=1)
    judged = (count >= 9) & (p_max >= DRIFT_MIN_POWER_W) & np.isfinite(t_stat)
    warm = rth * p_max >= DRIFT_MIN_KELVIN
    for row in np.flatnonzero(judged & warm & (t_stat > DRIFT_T_LIMIT) & (r2 >= DRIFT_MIN_R2)):
        found[row].append((FLAG_POWER_DRIFT, f"the residuals follow self-heating at the highest dissipation: at least "
                                             f"about {rth[row]:.3g} K/W, +{rth[row] * p_max[row]:.1f} K at {p_max[row]:.3g} W "
                                             f"(what the fitted parameters could not take up; t={t_stat[row]:.1f}, "
                                             f"it explains {100 * r2[row]:.0f} % of the residuals); where the part "
                                             "is below its zero-temperature-coefficient point it carries more current "
                                             "than the fitted curve; use a heat sink or a pulsed sweep"))
    return found
