"""The second-derivative threshold on the points themselves, for many sweeps at once.

VT is the VGS where d2 sqrt(ID) / dVGS2 peaks (the kink where conduction starts; Wong et al.,
Solid-State Electronics 30 (1987) 953, as presented in the review of Ortiz-Conde et al.,
Microelectronics Reliability 42 (2002) 583-596, which also names the method's weakness: the
second derivative amplifies noise, so it needs a smoothing derivative). The derivative here is a
local quadratic regression of sqrt(ID) on VGS around every point, over all points within a
fixed VGS half-width (a kernel window in volts, symmetric about the point: no binning, and a
straight line gives zero curvature whatever the point spacing). Moments of every window come
from cumulative sums, so all rows and all points are done in a few numpy passes.

The threshold is null unless the peak is inside the data: it must stand
:data:`PEAK_SIGNIFICANCE` standard errors above the curvature noise, not lie in the outer windows,
and the sweep must hold points below the kink (the slope of sqrt(ID) before the peak under half
its largest value); a sweep that starts above threshold, or a square law whose kink sits at its
first point, has no second-derivative threshold. Its standard error comes from the curvature's own
noise near the peak.
"""

from __future__ import annotations

from math import comb

import numpy as np

from benchlab.extract.engine import row_median
from benchlab.extract.thresholds import PEAK_SIGNIFICANCE

# kernel half-width as a fraction of each sweep's VGS span (our choice: 1/40 keeps the kink sharp
# to a few tens of mV on a 3 V span and averages a dozen or more points on a 100-point sweep)
HALF_WIDTH_FRACTION = 1.0 / 40.0
MIN_WINDOW_POINTS = 5
EDGE_WINDOWS = 2  # windows this close to either end cannot hold the peak
KINK_SLOPE_RATIO = 0.5


def _sorted(vgs, y, valid):
    order = np.argsort(np.where(valid, vgs, np.inf), axis=1, kind="stable")
    return [np.take_along_axis(a, order, axis=1) for a in (vgs, y, valid)]


def second_derivative_batch(vgs, i_d, valid) -> tuple[np.ndarray, np.ndarray]:
    """Second-derivative threshold of sqrt(ID) and its standard error (V) for every row (NaN where none).

    Parameters
    ----------
    vgs, i_d : ndarray, shape (B, N)
        Points (any order; padding anywhere).
    valid : ndarray of bool, shape (B, N)
    """
    valid = np.asarray(valid, bool)
    return curvature_peak_batch(vgs, np.sqrt(np.where(valid, np.maximum(np.asarray(i_d, float), 0.0), 0.0)), valid)


def curvature_peak_batch(vgs, y, valid) -> tuple[np.ndarray, np.ndarray]:
    """VGS at the peak of d2y/dVGS2 and its standard error, per row (NaN where the peak is not inside).

    ``y`` is sqrt(ID) for saturation data, ID for linear-region data.
    """
    vgs = np.asarray(vgs, float)
    valid = np.asarray(valid, bool) & np.isfinite(vgs)
    x, y, ok = _sorted(vgs, np.where(valid, np.asarray(y, float), 0.0), valid)
    rows, width = x.shape
    out = np.full(rows, np.nan), np.full(rows, np.nan)
    if width < MIN_WINDOW_POINTS:
        return out
    lo = np.where(ok, x, np.inf).min(axis=1, keepdims=True)
    hi = np.where(ok, x, -np.inf).max(axis=1, keepdims=True)
    span = np.where(np.isfinite(hi - lo) & (hi > lo), hi - lo, 1.0)
    t = np.where(ok, (x - lo) / span, 2.0)  # [0, 1]; padding beyond
    y = np.where(ok, y, 0.0)
    # half-width: a fixed part of the span, widened on sparse sweeps so a window holds about
    # MIN_WINDOW_POINTS points (2.5 x the upper-quartile spacing)
    # (valid points are sorted to the left, so a row's gaps are its first n - 1 differences)
    gaps = np.where(ok[:, 1:] & ok[:, :-1], np.diff(t, axis=1), -np.inf)
    n_gaps = np.maximum((ok[:, 1:] & ok[:, :-1]).sum(axis=1), 1)
    ranked = np.sort(gaps, axis=1)[:, ::-1]  # largest first
    wide = np.maximum(ranked[np.arange(rows), np.minimum(n_gaps // 4, width - 2)], 0.0)
    h = np.maximum(HALF_WIDTH_FRACTION, 0.5 * (MIN_WINDOW_POINTS) * wide)[:, None]
    # window bounds by a flat searchsorted over rows kept apart by an offset of 4 per row
    offset = 4.0 * np.arange(rows)[:, None]
    flat = (t + offset).ravel()
    left = np.searchsorted(flat, (t - h + offset).ravel(), "left").reshape(rows, width)
    right = np.searchsorted(flat, (t + h + offset).ravel(), "right").reshape(rows, width)
    base = (np.arange(rows) * width)[:, None]
    left, right = left - base, right - base  # indices within the row: [left, right)
    # every window sum at once: one cumulative sum over a stack of the nine summands
    t2 = t * t
    okf = ok.astype(float)
    summands = np.stack([okf, t * okf, t2 * okf, t2 * t * okf, t2 * t2 * okf,  # sum t^k, k = 0..4
                         y, t * y, t2 * y, y * y])  # sum t^k y, k = 0..2, and sum y^2
    cumulative = np.zeros((summands.shape[0], rows, width + 1))
    np.cumsum(summands, axis=2, out=cumulative[:, :, 1:])
    cumulative = cumulative.reshape(summands.shape[0], -1)
    start = (np.arange(rows) * (width + 1))[:, None]
    sums = (np.take(cumulative, (right + start).ravel(), axis=1)
            - np.take(cumulative, (left + start).ravel(), axis=1)).reshape(summands.shape)
    p, q = sums[:5], sums[5:]
    c = t
    # moments about the centre: sum (t - c)^j = sum_k C(j, k) t^k (-c)^(j - k)
    minus_c = [np.ones_like(c), -c]
    for _ in range(3):
        minus_c.append(minus_c[-1] * minus_c[1])
    m = [sum(comb(j, k) * p[k] * minus_c[j - k] for k in range(j + 1)) for j in range(5)]
    r = [sum(comb(j, k) * q[k] * minus_c[j - k] for k in range(j + 1)) for j in range(3)]
    count = m[0]
    # the 3x3 normal equations [[a b c] [b d e] [c e f]] inverted by cofactors (a batched
    # numpy inverse of this many small matrices is several times slower)
    a_, b_, c_, e_, f_ = m[0], m[1], m[2], m[3], m[4]
    d_ = c_
    co_a, co_b, co_c = d_ * f_ - e_ * e_, c_ * e_ - b_ * f_, b_ * e_ - c_ * d_
    co_d, co_e, co_f = a_ * f_ - c_ * c_, b_ * c_ - a_ * e_, a_ * d_ - b_ * b_
    det = a_ * co_a + b_ * co_b + c_ * co_c
    enough = ok & (count >= MIN_WINDOW_POINTS)
    usable = enough & (np.abs(det) > 1e-30 * np.maximum(a_ * c_ * f_, 1e-300))
    det = np.where(usable, det, 1.0)
    t0, t1, t2 = r
    coef = np.stack([co_a * t0 + co_b * t1 + co_c * t2, co_b * t0 + co_d * t1 + co_e * t2,
                     co_c * t0 + co_e * t1 + co_f * t2], -1) / det[..., None]
    inverse_22 = co_f / det
    rss = np.maximum(q[3] - (coef[..., 0] * t0 + coef[..., 1] * t1 + coef[..., 2] * t2), 0.0)
    window_noise = np.sqrt(rss / np.maximum(count - 3, 1))
    noise = row_median(window_noise, usable)[:, None]  # NaN for a sweep of a few points: no usable window
    noise = np.where(np.isfinite(noise), noise, 0.0)
    s2 = span * span
    slope = np.where(usable, coef[..., 1] / span, -np.inf)
    curvature = np.where(usable, 2.0 * coef[..., 2] / s2, -np.inf)
    curvature_se = 2.0 * noise * np.sqrt(np.abs(inverse_22)) / s2
    idx = np.arange(width)[None, :]
    n_use = usable.sum(axis=1)
    # order of usable windows within the row (edges counted over usable ones)
    rank = np.cumsum(usable, axis=1) - 1
    peak = np.argmax(curvature, axis=1)
    row = np.arange(rows)
    c1 = curvature[row, peak]
    inside = (rank[row, peak] >= EDGE_WINDOWS) & (rank[row, peak] <= n_use - 1 - EDGE_WINDOWS)
    significant = c1 > PEAK_SIGNIFICANCE * curvature_se[row, peak]
    max_slope = slope.max(axis=1)
    before = np.where(usable & (idx < peak[:, None]), slope, np.inf).min(axis=1)
    kink = before < KINK_SLOPE_RATIO * max_slope
    found = inside & significant & kink & (n_use >= 2 * EDGE_WINDOWS + 1)
    # refine: the centroid of the curvature bump above half its height, over the contiguous
    # windows around the peak (a smoothed kink is a symmetric bump whatever the point spacing)
    x_s = lo + c * span  # back in volts (= x)
    half = 0.5 * c1[:, None]
    above = usable & (curvature > half)
    # contiguous run around the peak: no gap (a usable window at or below half) between it and the peak
    below_left = np.where(usable & ~above & (idx < peak[:, None]), idx, -1).max(axis=1)
    below_right = np.where(usable & ~above & (idx > peak[:, None]), idx, width).min(axis=1)
    run = above & (idx > below_left[:, None]) & (idx < below_right[:, None])
    with np.errstate(invalid="ignore"):
        weight = np.where(run, curvature - half, 0.0)
    total = np.maximum(weight.sum(axis=1), 1e-300)
    refined = (weight * np.where(run, x_s, 0.0)).sum(axis=1) / total
    # standard error: each window's curvature noise moves the centroid by (x - centroid) / total.
    # Neighbouring windows share most points, so their noise is correlated: the independent sum is
    # scaled by the square root of a window's point count (between independent windows and fully
    # correlated ones; on noisy ngspice BSIM3 sweeps this quotes 0.6-2x the observed scatter)
    share = np.where(run, (x_s - refined[:, None]) / total[:, None], 0.0)
    points_per_window = np.maximum(np.where(run, count, 1.0).mean(axis=1), 1.0)
    variance = (share * share * curvature_se * curvature_se).sum(axis=1) * np.sqrt(points_per_window)
    stderr = np.sqrt(variance)
    return np.where(found, refined, np.nan), np.where(found, stderr, np.nan)
