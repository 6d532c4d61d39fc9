"""The data-based thresholds of :mod:`benchlab.extract.thresholds`, for many sweeps at once.

Same definitions and sources as the one-sweep functions there (which stay the readable
reference; a test checks both agree), computed on stacked ``(B, N)`` arrays with a validity
mask so that :func:`benchlab.extract.fit_batch` needs no Python loop over sweeps.
"""

from __future__ import annotations


import numpy as np

from benchlab.extract.second_derivative import second_derivative_batch

BINS = 60
HALF_WIDTH = 2


def _sorted_rows(key, valid, *arrays):
    # sort each row by key, invalid entries last (rows in that order already, as a fit's rows by current, stay)
    key = np.where(valid, key, np.inf)
    if np.all(key[:, 1:] >= key[:, :-1]):  # a stable sort would leave every row as it is
        return [valid, *arrays]
    order = np.argsort(key, axis=1, kind="stable")
    return [np.take_along_axis(a, order, axis=1) for a in (valid, *arrays)]


def _binned_rows(x, y, valid):
    """Rows with more than BINS points averaged into BINS equal-width bins, compacted to the left."""
    count_row = valid.sum(axis=1)
    rows, width = x.shape
    lo = np.where(valid, x, np.inf).min(axis=1, keepdims=True)
    hi = np.where(valid, x, -np.inf).max(axis=1, keepdims=True)
    span = np.where(hi > lo, hi - lo, 1.0)
    index = np.minimum(((x - lo) / span * BINS).astype(int), BINS - 1)
    flat = (np.arange(rows)[:, None] * BINS + np.clip(index, 0, BINS - 1))[valid]
    counts = np.bincount(flat, minlength=rows * BINS).reshape(rows, BINS)
    sum_x = np.bincount(flat, x[valid], rows * BINS).reshape(rows, BINS)
    sum_y = np.bincount(flat, y[valid], rows * BINS).reshape(rows, BINS)
    full = counts > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        bx, by = sum_x / counts, sum_y / counts
    # bins are in rising x already; move the empty ones to the end
    order = np.argsort(~full, axis=1, kind="stable")
    bx, by, full = (np.take_along_axis(a, order, axis=1) for a in (bx, by, full))
    use_bins = (count_row > BINS)[:, None]
    k = min(width, BINS)
    out_x = np.where(use_bins, bx[:, :k], x[:, :k])
    out_y = np.where(use_bins, by[:, :k], y[:, :k])
    out_valid = np.where(use_bins, full[:, :k], valid[:, :k])
    return np.where(out_valid, out_x, 0.0), np.where(out_valid, out_y, 0.0), out_valid


def _window_sum(a, width):
    # sum over each run of `width` neighbours along axis 1 (shifted slices: faster than a strided view's sum)
    out = a[:, :a.shape[1] - width + 1].copy()
    for k in range(1, width):
        out += a[:, k:a.shape[1] - width + 1 + k]
    return out


def _parabolas(x, y, valid):
    """Least-squares parabola through each run of 2 HALF_WIDTH + 1 neighbours: its centre, whether all its
    points are valid, its value and slope at the centre."""
    width = 2 * HALF_WIDTH + 1
    count = x.shape[1] - width + 1
    ok = _window_sum(valid.astype(np.int8), width) == width
    centre = x[:, HALF_WIDTH:HALF_WIDTH + count]
    dx = [x[:, k:k + count] - centre for k in range(width)]
    scale = np.maximum(np.maximum.reduce([np.abs(d) for d in dx]), 1e-12)
    u = [d / scale for d in dx]
    ys = [y[:, k:k + count] for k in range(width)]
    u2 = [v * v for v in u]
    # normal equations [[a b c] [b d e] [c e f]] of the parabola, inverted by cofactors (numpy's
    # batched inverse of many 3x3 matrices is several times slower)
    a = np.full(centre.shape, float(width)) + 1e-12
    b, c, e = sum(u), sum(u2), sum(v2 * v for v, v2 in zip(u, u2))
    f = sum(v2 * v2 for v2 in u2) + 1e-12
    d = c + 1e-12
    co_a, co_b, co_c = d * f - e * e, c * e - b * f, b * e - c * d
    co_d, co_e = a * f - c * c, b * c - a * e
    det = a * co_a + b * co_b + c * co_c
    det = np.where(ok & (det != 0), det, 1.0)
    t0, t1, t2 = sum(ys), sum(v * w for v, w in zip(u, ys)), sum(v2 * w for v2, w in zip(u2, ys))
    value = (co_a * t0 + co_b * t1 + co_c * t2) / det
    slope = (co_b * t0 + co_d * t1 + co_e * t2) / det / scale
    return {"x": centre, "ok": ok, "value": value, "slope": slope}


def _esr_thresholds(vgs, i_d, valid):
    # the tangent of sqrt(ID) at its steepest point, extrapolated to zero
    valid, vgs, root = _sorted_rows(vgs, valid, vgs, np.sqrt(np.where(valid, i_d, 0.0)))
    x, y, ok_points = _binned_rows(vgs, root, valid)
    rows = np.arange(x.shape[0])
    esr = np.full(x.shape[0], np.nan)
    if x.shape[1] < 2 * HALF_WIDTH + 1:
        return esr
    fit = _parabolas(x, y, ok_points)
    slope = np.where(fit["ok"], fit["slope"], -np.inf)
    best = np.argmax(slope, axis=1)
    steep = slope[rows, best]
    with np.errstate(all="ignore"):
        return np.where(steep > 0, fit["x"][rows, best] - fit["value"][rows, best] / steep, np.nan)


def _pchip_end_slope(h0, h1, m0, m1):
    # scipy's PchipInterpolator end condition (a one-sided three-point estimate, shape-preserving)
    d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    d = np.where(np.sign(d) != np.sign(m0), 0.0, d)
    return np.where((np.sign(m0) != np.sign(m1)) & (np.abs(d) > 3.0 * np.abs(m0)), 3.0 * m0, d)


def _pchip_slope(x, y, n, j):
    """Fritsch-Carlson derivative of the monotone cubic at index j of each row (rows of n >= 3 points)."""
    rows = np.arange(x.shape[0])
    last = n - 1

    def at(k):
        return np.clip(k, 0, x.shape[1] - 1)

    h = lambda k: x[rows, at(k + 1)] - x[rows, at(k)]  # noqa: E731
    m = lambda k: (y[rows, at(k + 1)] - y[rows, at(k)]) / h(k)  # noqa: E731
    with np.errstate(all="ignore"):
        h_prev, h_next, m_prev, m_next = h(j - 1), h(j), m(j - 1), m(j)
        w1, w2 = 2.0 * h_next + h_prev, h_next + 2.0 * h_prev
        interior = np.where(m_prev * m_next > 0, (w1 + w2) / (w1 / m_prev + w2 / m_next), 0.0)
        start = _pchip_end_slope(h(0), h(1), m(0), m(1))
        end = _pchip_end_slope(h(last - 1), h(last - 2), m(last - 1), m(last - 2))
    return np.where(j <= 0, start, np.where(j >= last, end, interior))


def constant_current_batch(vgs, i_d, valid, current: float) -> np.ndarray:
    """VGS at ``current`` per row (NaN outside the data).

    As :func:`benchlab.extract.thresholds.constant_current_threshold`, for many sweeps.
    """
    valid, i_s, v_s = _sorted_rows(i_d, valid, i_d, vgs)
    n = valid.sum(axis=1)
    rows = np.arange(v_s.shape[0])
    with np.errstate(divide="ignore", invalid="ignore"):
        log_i = np.where(valid, np.log(np.where(valid, i_s, 1.0)), np.inf)
    target = np.log(current)
    i_min = np.where(valid, i_s, np.inf).min(axis=1)
    i_max = np.where(valid, i_s, -np.inf).max(axis=1)
    inside = (n > 0) & (i_min <= current) & (current <= i_max)
    k = np.clip((valid & (i_s < current)).sum(axis=1), 0, max(v_s.shape[1] - 1, 0))
    a = np.clip(k - 1, 0, None)
    xa, xb, ya, yb = log_i[rows, a], log_i[rows, k], v_s[rows, a], v_s[rows, k]
    with np.errstate(all="ignore"):
        steps = np.diff(np.where(valid, log_i, np.nan), axis=1)
        strictly = np.all(np.where(np.isnan(steps), 1.0, steps) > 0, axis=1) & (n >= 3)
        t = (target - xa) / (xb - xa)
        linear = ya + t * (yb - ya)
        span = xb - xa
        da, db = _pchip_slope(log_i, v_s, n, a), _pchip_slope(log_i, v_s, n, k)
        t2, t3 = t * t, t * t * t
        cubic = ((2 * t3 - 3 * t2 + 1) * ya + (t3 - 2 * t2 + t) * span * da + (-2 * t3 + 3 * t2) * yb
                 + (t3 - t2) * span * db)
    value = np.where(k == 0, v_s[rows, 0], np.where(strictly, cubic, linear))
    return np.where(inside, value, np.nan)


CC_SCATTER_POINTS = 7  # readings around the constant current whose scatter gives its standard error


def constant_current_stderr_batch(vgs, i_d, valid, current: float) -> np.ndarray:
    """Standard error (V) of the constant-current threshold of each row, from the data alone.

    The scatter of VGS about a parabola in ln(ID) through the :data:`CC_SCATTER_POINTS`
    readings nearest ``current`` (residual RMS with N - 3 degrees of freedom): one reading's
    uncertainty in VGS at that current, whatever model is fitted, with the meter noise on both
    VGS and ID in it. NaN where fewer than 6 readings exist or ``current`` is outside them.
    """
    valid, i_s, v_s = _sorted_rows(i_d, valid, i_d, vgs)
    rows, width = v_s.shape
    n = valid.sum(axis=1)
    size = min(CC_SCATTER_POINTS, width)
    k = (valid & (i_s < current)).sum(axis=1)
    first = np.clip(k - size // 2 - 1, 0, np.maximum(n - size, 0))
    index = np.minimum(first[:, None] + np.arange(size)[None, :], width - 1)
    take = lambda a: np.take_along_axis(a, index, axis=1)  # noqa: E731
    ok = take(valid)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.where(ok, np.log(np.where(ok, take(i_s), 1.0)) - np.log(current), 0.0)
    y = np.where(ok, take(v_s), 0.0)
    design = np.stack([np.ones_like(u), u, u * u], axis=-1) * ok[..., None]
    normal = np.einsum("bnp,bnq->bpq", design, design) + 1e-12 * np.eye(3)
    coef = np.linalg.solve(normal, np.einsum("bnp,bn->bp", design, y)[..., None])[..., 0]
    resid = np.where(ok, y - np.einsum("bnp,bp->bn", design, coef), 0.0)
    dof = ok.sum(axis=1) - 3
    with np.errstate(divide="ignore", invalid="ignore"):
        scatter = np.sqrt((resid * resid).sum(axis=1) / dof)
    i_min = np.where(valid, i_s, np.inf).min(axis=1)
    i_max = np.where(valid, i_s, -np.inf).max(axis=1)
    usable = (n >= 6) & (dof >= 3) & (i_min <= current) & (current <= i_max)
    return np.where(usable, scatter, np.nan)


def thresholds_batch(vgs, i_d, valid, cc_current: float, errors: dict | None = None) -> dict[str, np.ndarray]:
    """ESR, SD and constant-current thresholds of every row (NaN where a method gives none).

    Parameters
    ----------
    vgs, i_d : ndarray, shape (B, N)
        Points of each sweep's fitted direction (any order; padding anywhere).
    valid : ndarray of bool, shape (B, N)
    cc_current : float
        The constant-current criterion (A).
    errors : dict, optional
        Filled with the standard errors (V) of the methods that give one (the second-derivative one).
    """
    valid = np.asarray(valid, dtype=bool)
    esr = _esr_thresholds(vgs, i_d, valid)
    sd, sd_error = second_derivative_batch(vgs, i_d, valid)
    if errors is not None:  # standard errors of the methods that give one
        errors["second_derivative_sqrt"] = sd_error
    return {"extrapolation_sqrt_max_slope": esr, "second_derivative_sqrt": sd,
            "constant_current": constant_current_batch(vgs, i_d, valid, cc_current)}
