"""Errors in both variables: effective-variance weights for a sweep whose VGS and ID are both measured.

A diode-connected sweep reads VGS and ID with noise. Where the curve is steep a small VGS error
is a large ID error, so a point's current residual has variance

    sigma_i^2 = sigma_I,i^2 + gm_i^2 sigma_V^2

(the effective variance of Orear, Am. J. Phys. 50 (1982) 912), with gm_i = dID/dVGS from the
current model. When the record states the VGS noise (a session's repeated readings, ``spread_v``)
it is used as given; otherwise both levels are estimated from the fit's own squared residuals with
the variance model

    sigma_i^2 = c0 + c1 ID_i^2 + c2 gm_i^2

(an absolute current floor, a relative current error and VGS noise seen through the slope; all
three non-negative), then the sweep is re-fitted with weights 1 / sigma_i^2, and the weights are
re-evaluated with the new parameters (two passes converge). Everything works on stacked
``(B, N)`` rows like :mod:`benchlab.extract.engine`.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np

from benchlab.extract.engine import CHUNK_ROWS, BatchFit, _current_and_jacobian, join_fits, row_median, solve_batch
from benchlab.models import thermal_voltage

PASSES = 2
# weights never exceed this many times the median weight of a sweep's fitted points, so a point
# the variance model puts at zero noise (below a hard cut-off threshold) cannot dominate
MAX_WEIGHT_RATIO = 1e4
_SUBSETS = [s for k in (3, 2, 1) for s in combinations(range(3), k)]


def _nonnegative_least_squares(design, y, weight):
    """Per row, min sum w (y - X c)^2 with c >= 0, for 3 columns (every subset tried: exact, batched)."""
    rows = design.shape[0]
    columns = [design[..., k] for k in range(3)]
    weighted = [weight * c for c in columns]
    # the full normal equations once; each subset's are a block of them
    normal = np.empty((rows, 3, 3))
    for p in range(3):
        for q in range(p, 3):
            normal[:, p, q] = normal[:, q, p] = np.einsum("bn,bn->b", weighted[p], columns[q])
    rhs = np.stack([np.einsum("bn,bn->b", w, y) for w in weighted], axis=1)
    best = np.zeros((rows, 3))
    best_cost = np.full(rows, np.inf)
    for subset in _SUBSETS:
        cols = list(subset)
        block = normal[:, cols][:, :, cols] + 1e-12 * np.eye(len(cols))
        coef = np.linalg.solve(block, rhs[:, cols, None])[..., 0]
        full = np.zeros((rows, 3))
        full[:, cols] = coef
        resid = y - sum(columns[k] * full[:, k:k + 1] for k in cols)
        cost = np.einsum("bn,bn->b", weight, resid * resid)
        ok = np.all(coef >= 0, axis=1) & (cost < best_cost)
        best[ok], best_cost[ok] = full[ok], cost[ok]
    return best


def point_variance(model: str, vgs, i_meas, mask, params, *, ut: float = thermal_voltage(),
                   sigma_v=None, previous=None) -> np.ndarray:
    """Each point's current variance (A^2) under the effective-variance model, shape (B, N).

    Parameters
    ----------
    model : str
    vgs, i_meas, mask : ndarray, shape (B, N)
        The points and the fit window (as :func:`benchlab.extract.engine.solve_batch`).
    params : ndarray, shape (B, P)
        The current parameters.
    ut : float
        Thermal voltage (V), ekv only.
    sigma_v : ndarray, shape (B,) or (B, N), optional
        Known VGS noise (V); NaN where unknown (then estimated with the other levels).
    previous : ndarray, shape (B, N), optional
        The variance of the previous pass, to weight the squared residuals (their own spread
        grows as the variance squared).
    """
    mask = np.asarray(mask, float)
    current, columns = _current_and_jacobian(model, vgs, params, ut)
    gm = -columns[0]  # every model's first parameter is the threshold: dI/dVth = -dI/dVGS
    e2 = np.where(mask > 0, (i_meas - current) ** 2, 0.0)
    g2 = gm * gm
    known_v2 = np.zeros((mask.shape[0], 1))
    free_v = np.ones((mask.shape[0], 1))
    if sigma_v is not None:
        sv = np.asarray(sigma_v, float).reshape(-1, 1)
        known_v2 = np.where(np.isfinite(sv), sv * sv, 0.0)
        free_v = np.where(np.isfinite(sv), 0.0, 1.0)  # a stated VGS noise is used as given
    # generalised least squares on the squared residuals, whose own spread grows as the variance:
    # divide by the previous pass's variance (the relative-error model of the first fit at first),
    # which keeps the numbers near 1 over many decades of current
    if previous is None:
        previous = np.where(mask > 0, np.asarray(i_meas, float) ** 2, 1.0)
    norm = np.where(mask > 0, np.maximum(previous, 1e-300), 1.0)
    y = (e2 - known_v2 * g2 * mask) / norm
    design = np.stack([mask, mask * current * current, mask * g2 * free_v], axis=-1) / norm[..., None]
    # scale the columns so the normal equations are well conditioned
    count = np.maximum(mask.sum(axis=1, keepdims=True), 1.0)
    scale = np.sqrt(np.einsum("bnp,bnp->bp", design, design) / count)
    scale = np.where(scale > 0, scale, 1.0)
    design = design / scale[:, None, :]
    coef = _nonnegative_least_squares(design, y, mask)
    variance = norm * sum(design[..., k] * coef[:, k:k + 1] for k in range(3)) + known_v2 * g2
    median = row_median(variance, mask > 0)[:, None]
    floor = np.where(np.isfinite(median) & (median > 0), median / MAX_WEIGHT_RATIO, 1e-300)
    return np.where(mask > 0, np.maximum(variance, floor), 1.0)


def effective_variance_fit(model: str, vgs, i_meas, mask, params, *, ut: float = thermal_voltage(),
                           sigma_v=None, passes: int = PASSES, with_covariance: bool = True
                           ) -> tuple[BatchFit, np.ndarray]:
    """Re-fit stacked sweeps with effective-variance weights, starting from ``params``
    (``with_covariance`` False leaves the covariance NaN, for a fit whose errors nobody reads).

    Returns
    -------
    (BatchFit, ndarray)
        The weighted fit (its covariance is the sandwich form of
        :func:`benchlab.extract.engine.sandwich_covariance`, robust to a wrong variance model) and
        the point standard deviations (A) of the last pass, shape (B, N).
    """
    if vgs.shape[0] > CHUNK_ROWS:  # cache-sized chunks (as fit_stacked): each row's numbers are its own
        parts = [effective_variance_fit(model, vgs[lo:lo + CHUNK_ROWS], i_meas[lo:lo + CHUNK_ROWS],
                                        mask[lo:lo + CHUNK_ROWS], params[lo:lo + CHUNK_ROWS], ut=ut,
                                        sigma_v=sigma_v if sigma_v is None or np.ndim(sigma_v) == 0 else sigma_v[lo:lo + CHUNK_ROWS],
                                        passes=passes, with_covariance=with_covariance)
                 for lo in range(0, vgs.shape[0], CHUNK_ROWS)]
        return join_fits([fit for fit, _ in parts]), np.concatenate([s for _, s in parts])
    variance = None
    fit = None
    for done in range(1, passes + 1):
        variance = point_variance(model, vgs, i_meas, mask, params, ut=ut, sigma_v=sigma_v, previous=variance)
        fit = solve_batch(model, vgs, i_meas, mask, params, ut=ut, sigma=np.sqrt(variance),
                          with_covariance=with_covariance and done == passes)
        params = np.where(np.isfinite(fit.params), fit.params, params)
    return fit, np.sqrt(variance)
