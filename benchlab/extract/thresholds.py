"""Threshold-voltage definitions and curve quantities measured straight from sweep data.

Each method is the published one, applied to a diode-connected part (VDS = VGS, so the
part is in saturation wherever it conducts). The review that defines and compares them:
A. Ortiz-Conde, F. J. Garcia Sanchez, J. J. Liou, A. Cerdeira, M. Estrada, Y. Yue,
"A review of recent MOSFET threshold voltage extraction methods", Microelectronics
Reliability 42 (2002) 583-596, doi:10.1016/S0026-2714(02)00027-6.

- :func:`max_slope_extrapolation`: the tangent at the point of maximum slope, extrapolated
  to zero. On ID in the linear region this is the ELR method (intercept VT + VDS/2); on
  sqrt(ID) in saturation it is the ESR method (intercept VT), review section 2.
- :func:`second_derivative_peak`: VT at the maximum of the second derivative (Wong et al.,
  Solid-State Electronics 30 (1987) 953, citation from memory, as presented in the review).
  On ID in the linear region the derivative is the transconductance change dgm/dVGS; in
  saturation we apply it to sqrt(ID), which is linear in VGS above threshold exactly as ID
  is in the linear region.
- :func:`constant_current_threshold`: VGS at a fixed drain current (power-MOSFET datasheets
  state VGS(th) at VDS = VGS and ID = 250 uA: common practice, no standard text).

All functions are pure; they take the points of one sweep sorted by rising VGS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

PEAK_SIGNIFICANCE = 6.0  # standard errors; our choice


@dataclass(frozen=True)
class LocalFits:
    """Least-squares parabolas through each run of ``2 half_width + 1`` neighbouring points.

    Attributes
    ----------
    x : ndarray
        The abscissa the parabolas were fitted on.
    centres : ndarray of int
        Index into ``x`` of each parabola's centre.
    value, slope, curvature : ndarray
        Smoothed y, dy/dx and d2y/dx2 at the centres.
    curvature_se : ndarray
        Standard error of ``curvature``: the noise of y pooled over the sweep (median of the
        parabolas' residual RMS, robust to the few windows that straddle a kink) carried
        through each window's least-squares geometry.
    """

    x: np.ndarray
    centres: np.ndarray
    value: np.ndarray
    slope: np.ndarray
    curvature: np.ndarray
    curvature_se: np.ndarray


def _fit_parabolas(x, y, half_width: int) -> LocalFits:
    width = 2 * half_width + 1
    if x.size < width:
        empty = np.empty(0)
        return LocalFits(x, np.empty(0, dtype=int), empty, empty, empty, empty)
    xs = np.lib.stride_tricks.sliding_window_view(x, width)
    ys = np.lib.stride_tricks.sliding_window_view(y, width)
    centres = np.arange(half_width, x.size - half_width)
    dx = xs - x[centres][:, None]
    scale = np.maximum(np.abs(dx).max(axis=1), 1e-12)
    u = dx / scale[:, None]  # conditioned abscissa in [-1, 1]
    u2 = u * u
    m1, m2, m3, m4 = u.sum(1), u2.sum(1), (u2 * u).sum(1), (u2 * u2).sum(1)
    m0 = np.full_like(m1, float(width))
    normal = np.stack([np.stack([m0, m1, m2], -1), np.stack([m1, m2, m3], -1), np.stack([m2, m3, m4], -1)], -2)
    inverse = np.linalg.inv(normal + 1e-12 * np.eye(3))
    rhs = np.stack([ys.sum(1), (u * ys).sum(1), (u2 * ys).sum(1)], -1)
    coef = np.einsum("wpq,wq->wp", inverse, rhs)
    resid = ys - (coef[:, :1] + coef[:, 1:2] * u + coef[:, 2:3] * u2)
    noise = float(np.median(np.sqrt((resid * resid).sum(1) / max(width - 3, 1))))
    s2 = scale * scale
    return LocalFits(x=x, centres=centres, value=coef[:, 0], slope=coef[:, 1] / scale,
                     curvature=2.0 * coef[:, 2] / s2,
                     curvature_se=2.0 * noise * np.sqrt(np.abs(inverse[:, 2, 2])) / s2)


def local_quadratic(x, y, half_width: int = 2):
    """Value, slope and curvature of ``y(x)`` from a least-squares parabola around each point.

    Works on unevenly spaced ``x`` (a sweep through a resistor crowds points near threshold).

    Parameters
    ----------
    x, y : array_like
        Points sorted by rising ``x``.
    half_width : int
        Points on each side of the centre used by each parabola.

    Returns
    -------
    centres : ndarray of int
        Indices of the points that have a full window (``half_width`` .. n - half_width - 1).
    value, slope, curvature : ndarray
        Smoothed y, dy/dx and d2y/dx2 at those points.
    """
    fits = _fit_parabolas(np.asarray(x, dtype=float), np.asarray(y, dtype=float), half_width)
    return fits.centres, fits.value, fits.slope, fits.curvature


def local_fits(vgs, y, half_width: int = 2) -> LocalFits:
    """:class:`LocalFits` of ``y(vgs)`` after :func:`binned` (the input of the derivative methods)."""
    return _fit_parabolas(*binned(vgs, y), half_width)


def binned(x, y, bins: int = 60):
    """Means of ``x`` and ``y`` in equal-width bins of ``x`` (empty bins dropped).

    Derivatives of a noisy sweep need a smoothing scale in volts, not in points: where a
    part is steep, successive VGS readings differ by less than the meter's noise. Bins of
    1/``bins`` of the VGS range give every derivative method that scale.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.size <= bins:
        order = np.argsort(x, kind="stable")
        return x[order], y[order]
    lo, hi = x.min(), x.max()
    index = np.minimum(((x - lo) / (hi - lo) * bins).astype(int), bins - 1)
    count = np.bincount(index, minlength=bins)
    keep = count > 0
    return (np.bincount(index, x, bins)[keep] / count[keep], np.bincount(index, y, bins)[keep] / count[keep])


def max_slope_extrapolation(vgs, y, half_width: int = 2, fits: LocalFits | None = None) -> float | None:
    """Intercept with y = 0 of the tangent to ``y(vgs)`` at its maximum slope.

    Pass ``sqrt(ID)`` for saturation data (ESR method) or ``ID`` for linear-region data
    (ELR method); see the module docstring for the source.

    Returns
    -------
    float or None
        The threshold (V); None when there are too few points for a tangent.
    """
    fits = fits if fits is not None else local_fits(vgs, y, half_width)
    if fits.centres.size == 0 or not np.any(fits.slope > 0):
        return None
    best = int(np.argmax(fits.slope))
    return float(fits.x[fits.centres[best]] - fits.value[best] / fits.slope[best])


def second_derivative_peak(vgs, y, half_width: int = 2, fits: LocalFits | None = None) -> float | None:
    """VGS at the maximum of d2y/dVGS2, refined between points by a parabola.

    Pass ``sqrt(ID)`` for saturation data, ``ID`` for linear-region data.

    Returns
    -------
    float or None
        None when the peak does not stand out of the noise (``PEAK_SIGNIFICANCE``
        standard errors), or lies at the edge of the data (the threshold is not inside the
        measured range, e.g. a sweep that starts above threshold) or there are too few points.
    """
    if fits is None:
        # the method on the points themselves (kernel local quadratic, see extract/second_derivative.py)
        from benchlab.extract.second_derivative import curvature_peak_batch

        x = np.asarray(vgs, float)
        peak, _ = curvature_peak_batch(x[None, :], np.asarray(y, float)[None, :], np.ones((1, x.size), bool))
        return None if np.isnan(peak[0]) else float(peak[0])
    centres, curvature = fits.centres, fits.curvature
    if centres.size < 3:
        return None
    best = int(np.argmax(curvature))
    # a peak must stand out of the curvature noise, else the data hold no threshold kink
    if best == 0 or best == centres.size - 1 or curvature[best] <= PEAK_SIGNIFICANCE * fits.curvature_se[best]:
        return None
    vgs = fits.x
    x0, x1, x2 = vgs[centres[best - 1:best + 2]]
    c0, c1, c2 = curvature[best - 1:best + 2]
    # vertex of the parabola through the peak and its neighbours
    h0, h2, d0, d2 = x0 - x1, x2 - x1, c0 - c1, c2 - c1
    det = h0 * h2 * (h0 - h2)
    if det == 0:
        return float(x1)
    a = (d0 * h2 - d2 * h0) / det
    b = (h0 * h0 * d2 - h2 * h2 * d0) / det
    if a >= 0:
        return float(x1)
    return float(x1 + np.clip(-b / (2.0 * a), h0, h2))


def constant_current_threshold(vgs, i_d, current: float) -> float | None:
    """VGS at drain current ``current``, interpolated in log(current), never extrapolated.

    Points are taken in order of current (where a part is steep its VGS readings may
    jitter back by meter noise). Through them runs a monotone cubic (PCHIP) of VGS as a
    function of ln(ID); when currents repeat, a straight line in ln(ID) between the two
    points around ``current``.

    Returns
    -------
    float or None
        None when ``current`` lies outside the measured currents.
    """
    vgs = np.asarray(vgs, dtype=float)
    i_d = np.asarray(i_d, dtype=float)
    if vgs.size == 0 or not (i_d.min() <= current <= i_d.max()):
        return None
    order = np.lexsort((vgs, i_d))
    vgs, i_d = vgs[order], i_d[order]
    log_i = np.log(i_d)
    target = np.log(current)
    if vgs.size >= 3 and np.all(np.diff(log_i) > 0):
        # imported here: scipy.interpolate takes longer to import than a batch of fits takes to run,
        # and the batched fit (benchlab fit) never needs it
        from scipy.interpolate import PchipInterpolator

        return float(PchipInterpolator(log_i, vgs)(target))
    above = np.flatnonzero(i_d >= current)
    k = int(above[0])
    if k == 0:
        return float(vgs[0])
    # the first crossing; log-linear between its neighbours
    frac = (target - log_i[k - 1]) / (log_i[k] - log_i[k - 1])
    return float(vgs[k - 1] + frac * (vgs[k] - vgs[k - 1]))


def gm_over_id_from_data(vgs, i_d, half_width: int = 2):
    """Transconductance efficiency gm/ID = d ln(ID) / dVGS (1/V) straight from the data.

    Returns
    -------
    vgs_centres, id_centres, gm_over_id : ndarray
        At the points that have a full smoothing window.
    """
    vgs = np.asarray(vgs, dtype=float)
    i_d = np.asarray(i_d, dtype=float)
    centres, _, slope, _ = local_quadratic(vgs, np.log(i_d), half_width)
    return vgs[centres], i_d[centres], slope


def gm_over_id_from_params(params, i_d):
    """gm/ID (1/V) of a fitted part (:class:`benchlab.models.DeviceParams`) at currents ``i_d`` (A)."""
    i_d = np.asarray(i_d, dtype=float)
    return np.asarray(params.gm_at(i_d), dtype=float) / i_d


def operating_curve(params, i_min: float, i_max: float, count: int = 12) -> dict[str, list[float]]:
    """VGS, gm and gm/ID of a fitted part at ``count`` currents spread evenly in log between ``i_min`` and ``i_max``.

    Returns
    -------
    dict
        ``id`` (A), ``vgs`` (V), ``gm`` (A/V), ``gm_over_id`` (1/V), each a list (plain JSON).
    """
    currents = np.geomspace(i_min, i_max, int(count))
    gm = np.asarray(params.gm_at(currents), dtype=float)
    return {"id": currents.tolist(), "vgs": np.asarray(params.vgs_at(currents), dtype=float).tolist(),
            "gm": gm.tolist(), "gm_over_id": (gm / currents).tolist()}


def all_thresholds(vgs, i_d, cc_current: float) -> dict[str, float | None]:
    """Every data-based threshold of one up sweep (sorted by VGS), keyed by method name.

    Keys: ``extrapolation_sqrt_max_slope`` (ESR), ``second_derivative_sqrt`` (SD on
    sqrt(ID)), ``constant_current`` (VGS at ``cc_current``).
    """
    fits = local_fits(vgs, np.sqrt(np.asarray(i_d, dtype=float)))
    return {
        "extrapolation_sqrt_max_slope": max_slope_extrapolation(None, None, fits=fits),
        "second_derivative_sqrt": second_derivative_peak(vgs, np.sqrt(np.asarray(i_d, dtype=float))),
        "constant_current": constant_current_threshold(vgs, i_d, cc_current),
    }
