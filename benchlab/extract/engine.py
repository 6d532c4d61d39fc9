"""Batched Levenberg-Marquardt fitting of the shared drain-current models.

Many sweeps are fitted in one vectorised pass: the points of B sweeps are stacked in
``(B, N)`` arrays (shorter sweeps padded and masked out), and every iteration builds
all Jacobians, normal equations and damped steps at once with numpy. A single sweep is
just a batch of one.

Error model: relative residuals r = (model - measured) / measured, because bench
currents span several decades and a meter's error grows with its reading. All models
are compared on the same error model, so their residual sums are comparable.

Parameter vectors (order matters; see :data:`PARAM_NAMES`):

- ``linear``: (vth, gm)            ID = gm (VGS - Vth) above Vth
- ``square``: (vth, kp)            ID = (KP/2) (VGS - Vth)^2
- ``theta``:  (vth, kp, theta)     ID = (KP/2) Vov^2 / (1 + THETA Vov)
- ``ekv``:    (vth, kp, theta, n)  the same with the EKV interpolated overdrive

The formulas are those of :mod:`benchlab.models`; a test checks that the engine's
model current equals :meth:`benchlab.models.DeviceParams.current`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlab.models import thermal_voltage

PARAM_NAMES: dict[str, tuple[str, ...]] = {
    "linear": ("vth", "gm"),
    "square": ("vth", "kp"),
    "theta": ("vth", "kp", "theta"),
    "ekv": ("vth", "kp", "theta", "n"),
}

# Lower bounds keep parameters physical (KP > 0, THETA >= 0, n >= 1); a parameter
# resting on its bound is reported by the caller as a flag.
_LOWER = {"vth": -np.inf, "gm": 1e-15, "kp": 1e-15, "theta": 0.0, "n": 1.0}


@dataclass(frozen=True)
class BatchFit:
    """Outcome of :func:`solve_batch` for B sweeps.

    Attributes
    ----------
    model : str
        Model name.
    params : ndarray, shape (B, P)
        Best parameters, columns in :data:`PARAM_NAMES` order.
    covariance : ndarray, shape (B, P, P)
        Heteroscedasticity-consistent (sandwich) covariance at the solution (see
        :func:`sandwich_covariance`).
    rss : ndarray, shape (B,)
        Sum of squared relative residuals.
    n_points : ndarray, shape (B,)
        Points fitted per sweep.
    iterations : ndarray, shape (B,)
        Iterations used per sweep.
    converged : ndarray of bool, shape (B,)
    """

    model: str
    params: np.ndarray
    covariance: np.ndarray
    rss: np.ndarray
    n_points: np.ndarray
    iterations: np.ndarray
    converged: np.ndarray


def model_current(model: str, vgs: np.ndarray, params: np.ndarray, ut: float = thermal_voltage()) -> np.ndarray:
    """Drain current of ``model`` for stacked sweeps.

    Parameters
    ----------
    model : str
        One of ``linear``, ``square``, ``theta``, ``ekv``.
    vgs : ndarray, shape (B, N)
        Gate-source voltages (V).
    params : ndarray, shape (B, P)
        Parameters in :data:`PARAM_NAMES` order.
    ut : float
        Thermal voltage (V), ekv only.

    Returns
    -------
    ndarray, shape (B, N)
    """
    current, _ = _current_and_jacobian(model, vgs, params, ut, want_jacobian=False)
    return current


def _current_and_jacobian(model, vgs, params, ut, want_jacobian=True):
    # Written for speed (it is the inner loop of every fit): few temporaries, and the
    # hard cut-off needs no extra mask because every derivative carries a factor q.
    vth = params[:, 0:1]
    if model == "linear":
        gm = params[:, 1:2]
        q = np.maximum(vgs - vth, 0.0)
        current = gm * q
        if not want_jacobian:
            return current, None
        return current, [-gm * (q > 0), q]
    # The arithmetic below is done in place where a temporary is not needed again: the same operations in the
    # same order as the formulas in the comments (so the same numbers to the last bit), fewer arrays allocated.
    kp = params[:, 1:2]
    if model == "ekv":
        n = params[:, 3:4]
        scale = 2.0 * n * ut
        x = np.subtract(vgs, vth)
        x /= scale  # x = (vgs - vth) / scale
        # softplus(x) = ln(1 + e^x) and logistic(x) = dsoftplus/dx from one overflow-free exponential
        e = np.abs(x)
        np.negative(e, out=e)
        np.exp(e, out=e)  # e = exp(-|x|)
        softplus = np.maximum(x, 0.0)
        softplus += np.log1p(e)  # softplus = max(x, 0) + log1p(e)
        q = scale * softplus
    else:
        q = np.subtract(vgs, vth)
        np.maximum(q, 0.0, out=q)  # q = max(vgs - vth, 0)
    if model == "square":
        half_q2 = 0.5 * q
        half_q2 *= q  # half_q2 = 0.5 q q
        current = kp * half_q2
        if not want_jacobian:
            return current, None
        return current, [-kp * q, half_q2]
    theta = params[:, 2:3]
    inv_denom = theta * q
    inv_denom += 1.0
    np.divide(1.0, inv_denom, out=inv_denom)  # inv_denom = 1 / (1 + theta q)
    half_q2_d = 0.5 * q
    half_q2_d *= q
    half_q2_d *= inv_denom  # half_q2_d = 0.5 q q inv_denom
    current = kp * half_q2_d
    if not want_jacobian:
        return current, None
    kq_d = kp * q
    kq_d *= inv_denom  # kq_d = kp q inv_denom
    di_dq = (0.5 * theta) * q
    di_dq += 1.0
    np.multiply(kq_d, di_dq, out=di_dq)
    di_dq *= inv_denom  # di_dq = kq_d (1 + 0.5 theta q) inv_denom
    d_theta = np.negative(kq_d, out=kq_d)
    d_theta *= half_q2_d  # d_theta = -kq_d half_q2_d
    if model == "theta":
        return current, [np.negative(di_dq, out=di_dq), half_q2_d, d_theta]
    dq_dvov = np.where(x >= 0.0, 1.0, e)
    e += 1.0
    dq_dvov /= e  # logistic(x) = where(x >= 0, 1, e) / (1 + e)
    dq_dn = np.multiply(x, dq_dvov, out=x)
    np.subtract(softplus, dq_dn, out=dq_dn)
    dq_dn *= 2.0 * ut  # dq_dn = 2 ut (softplus - x dq_dvov)
    first = np.negative(di_dq)
    first *= dq_dvov  # -di_dq dq_dvov
    return current, [first, half_q2_d, d_theta, np.multiply(di_dq, dq_dn, out=dq_dn)]


def row_median(values: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Median of each row's kept entries (NaN for a row with none), as ``np.nanmedian`` gives with the others
    set to NaN, without its masked-array path (slow on many short rows, and an import of its own).

    Parameters
    ----------
    values : ndarray, shape (B, N)
    keep : ndarray of bool, shape (B, N)

    Returns
    -------
    ndarray, shape (B,)
    """
    keep = np.asarray(keep, bool) & ~np.isnan(values)
    ordered = np.sort(np.where(keep, values, np.inf), axis=1)
    count = keep.sum(axis=1)
    rows = np.arange(ordered.shape[0])
    if ordered.shape[1] == 0:
        return np.full(ordered.shape[0], np.nan)
    low = ordered[rows, np.clip((count - 1) // 2, 0, None)]
    high = ordered[rows, np.clip(count // 2, 0, ordered.shape[1] - 1)]
    with np.errstate(invalid="ignore"):
        return np.where(count > 0, 0.5 * (low + high), np.nan)


def lower_bounds(model: str) -> np.ndarray:
    """Lower bound of each parameter of ``model`` (``-inf`` when unbounded)."""
    return np.array([_LOWER[name] for name in PARAM_NAMES[model]])


def _project(model, params):
    return np.maximum(params, lower_bounds(model))


def _residuals(model, vgs, inv, target, params, ut):
    # weighted residuals (inv = mask / sigma, target = measured current x inv; for relative
    # residuals sigma is the measured current and target the mask) and the Jacobian columns, a
    # list of (B, N) arrays: building the normal equations column by column is several
    # times faster than a stacked matmul
    current, columns = _current_and_jacobian(model, vgs, params, ut)
    current *= inv
    current -= target  # current x inv - target
    for column in columns:  # the columns are this call's own arrays
        column *= inv
    return current, columns


def _normal_equations(r, columns):
    n_par = len(columns)
    normal = np.empty((r.shape[0], n_par, n_par))
    gradient = np.empty((r.shape[0], n_par))
    for p in range(n_par):
        gradient[:, p] = np.einsum("bn,bn->b", columns[p], r)
        for q in range(p, n_par):
            normal[:, p, q] = normal[:, q, p] = np.einsum("bn,bn->b", columns[p], columns[q])
    return normal, gradient


def solve_batch(model: str, vgs: np.ndarray, i_meas: np.ndarray, mask: np.ndarray, start: np.ndarray, *,
                ut: float = thermal_voltage(), max_iter: int = 100, tol: float = 1e-8,
                with_covariance: bool = True, sigma: np.ndarray | None = None) -> BatchFit:
    """Levenberg-Marquardt on relative (or weighted) residuals for B stacked sweeps at once.

    Parameters
    ----------
    model : str
        Model name (see :data:`PARAM_NAMES`).
    vgs, i_meas : ndarray, shape (B, N)
        Measured points; padded entries may hold any positive value.
    mask : ndarray, shape (B, N)
        1.0 where a point takes part in the fit, 0.0 elsewhere.
    start : ndarray, shape (B, P)
        Starting parameters (see :func:`initial_guess`).
    ut : float
        Thermal voltage (V) for the ekv model.
    max_iter : int
        Iteration cap per sweep.
    tol : float
        Stop when a step changes every parameter by less than ``tol`` relative to its size.
    with_covariance : bool
        Compute the covariance (False leaves it NaN: for starting-value fits).
    sigma : ndarray, shape (B, N), optional
        Each point's standard deviation (A): residuals are (model - measured) / sigma. Default:
        the measured current (relative residuals).

    Returns
    -------
    BatchFit
    """
    vgs = np.asarray(vgs, dtype=float)
    i_meas = np.asarray(i_meas, dtype=float)
    mask = np.asarray(mask, dtype=float)
    # padded entries must not divide by zero
    inv = mask / np.where(mask > 0, i_meas if sigma is None else sigma, 1.0)
    target = mask if sigma is None else i_meas * inv
    params = _project(model, np.array(start, dtype=float))
    n_batch, n_par = params.shape
    # the residuals and Jacobian of the active rows at their current parameters: each trial step
    # evaluates both at once (the costly functions are shared), so an accepted step's are reused
    # as the next iteration's instead of being computed a second time
    r, columns = _residuals(model, vgs, inv, target, params, ut)
    cost = np.einsum("bn,bn->b", r, r)
    damping = np.full(n_batch, 1e-6)
    growth = np.full(n_batch, 2.0)  # how much a failed step raises the damping (doubles at each failure)
    iterations = np.zeros(n_batch, dtype=int)
    converged = np.zeros(n_batch, dtype=bool)
    active = np.arange(n_batch)
    v, w, m = vgs, inv, target
    eye = np.eye(n_par)
    lower = lower_bounds(model)
    for _ in range(max_iter):
        if active.size == 0:
            break
        p = params[active]
        normal, gradient = _normal_equations(r, columns)
        # active set: a parameter on its bound whose descent direction points out of the
        # allowed range is held there (its row and column decouple), so the others can move
        held = (p <= lower + 1e-12) & (gradient > 0)
        if held.any():
            free = ~held
            normal = normal * (free[:, :, None] & free[:, None, :]) + held[:, :, None] * eye
            gradient = np.where(held, 0.0, gradient)
        diag = np.diagonal(normal, axis1=1, axis2=2)
        # Marquardt scaling by diag(J^T J); the floor keeps columns with no information solvable
        floor = 1e-12 * np.maximum(diag.max(axis=1, keepdims=True), 1e-300)
        scaled = np.maximum(diag, floor)
        lam = damping[active][:, None]
        system = normal + (lam * scaled)[:, :, None] * eye + (floor[:, :, None] * eye)
        step = -np.linalg.solve(system, gradient[..., None])[..., 0]
        trial = _project(model, p + step)
        r_trial, columns_trial = _residuals(model, v, w, m, trial, ut)
        trial_cost = np.einsum("bn,bn->b", r_trial, r_trial)
        old_cost = cost[active]
        better = trial_cost <= old_cost
        moved = np.abs(trial - p) <= tol * (np.abs(p) + 1e-6)
        # at the optimum, rounding makes steps fail by a hair: that counts as converged too
        flat = np.abs(old_cost - trial_cost) <= 1e-12 * old_cost
        small = np.all(moved, axis=1) | flat
        params[active[better]] = trial[better]
        cost[active[better]] = trial_cost[better]
        if better.all():
            r, columns = r_trial, columns_trial
        elif better.any():
            keep_new = better[:, None]
            for old, new in zip([r, *columns], [r_trial, *columns_trial]):
                np.copyto(old, new, where=keep_new)  # where(keep_new, new, old), in place: these are the fit's own
        # damping from the gain ratio (H. B. Nielsen, Damping parameter in Marquardt's method, IMM-REP-1999-05,
        # Technical University of Denmark; Madsen, Nielsen & Tingleff, Methods for non-linear least squares
        # problems, 2004, chapter 3; citations from memory): lowered as far as the step's actual over predicted
        # decrease earns, raised ever faster while steps fail. The plain x10 / x0.1 rule made every other step
        # fail in a curved valley (an ekv fit of a sweep starting above threshold took 77 iterations, now 34)
        h = trial - p
        predicted = -(2.0 * np.einsum("bp,bp->b", gradient, h) + np.einsum("bp,bpq,bq->b", h, normal, h))
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = np.where(predicted > 0, (old_cost - trial_cost) / predicted, 0.0)
        shrink = np.maximum(1.0 / 3.0, 1.0 - (2.0 * np.clip(gain, 0.0, 1.0) - 1.0) ** 3)
        damping[active] = np.where(better, damping[active] * shrink, damping[active] * growth[active])
        growth[active] = np.where(better, 2.0, growth[active] * 2.0)
        iterations[active] += 1
        stalled = damping[active] > 1e12
        done = small | stalled
        converged[active[small]] = True
        # a sweep that stalls with a tiny gradient is at its optimum too
        converged[active[stalled]] = True
        if done.any():
            going = ~done
            active = active[going]
            v, w, m, r = v[going], w[going], m[going], r[going]
            columns = [c[going] for c in columns]
    n_points = mask.sum(axis=1)
    if with_covariance:
        covariance = sandwich_covariance(model, vgs, inv, target, params, ut)
    else:
        covariance = np.full((n_batch, n_par, n_par), np.nan)
    return BatchFit(model=model, params=params, covariance=covariance, rss=cost, n_points=n_points,
                    iterations=iterations, converged=converged)


def sandwich_covariance(model: str, vgs: np.ndarray, inv: np.ndarray, target: np.ndarray, params: np.ndarray,
                        ut: float = thermal_voltage()) -> np.ndarray:
    """Heteroscedasticity-consistent covariance of the fitted parameters, shape (B, P, P).

    Both VGS and ID are measured and the curve is steep, so a point's residual holds its
    current noise plus gm times its VGS noise, and their sizes change along the sweep; the
    textbook s^2 (J^T J)^-1 assumes one relative error size for every point and was 2-3x too
    small. The sandwich form (J^T J)^-1 J^T diag(r_i^2 / (1 - h_i)^2) J (J^T J)^-1 takes each
    point's own squared residual as its variance, whatever mixes the two axes' noise (White,
    Econometrica 48 (1980) 817; the leverage correction 1 / (1 - h_i)^2 is MacKinnon & White's
    HC3, J. Econometrics 29 (1985) 305: the points near threshold carry most of the weight, and
    the uncorrected form then reads 10-15 % small on 200 ngspice sweeps). The residuals are the
    weighted ones the fit minimises: ``inv`` is mask / sigma, ``target`` measured current x ``inv``.
    """
    r, columns = _residuals(model, vgs, inv, target, params, ut)
    normal, _ = _normal_equations(r, columns)
    bread = np.linalg.pinv(normal)
    jac = np.stack(columns, axis=-1)  # (B, N, P)
    leverage = np.einsum("bnq,bnq->bn", jac @ bread, jac)
    weight = r * r / np.clip(1.0 - leverage, 0.05, None) ** 2
    meat = np.swapaxes(jac * weight[..., None], 1, 2) @ jac
    return bread @ meat @ bread


def _weighted_line(x, y, w):
    # per-row weighted least-squares line y = a + b x (rows with < 2 points get b = nan)
    sw = w.sum(axis=1)
    mx = (w * x).sum(axis=1) / np.where(sw > 0, sw, 1.0)
    my = (w * y).sum(axis=1) / np.where(sw > 0, sw, 1.0)
    dx = x - mx[:, None]
    sxx = (w * dx * dx).sum(axis=1)
    sxy = (w * dx * (y - my[:, None])).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = sxy / sxx
    return my - slope * mx, slope


def initial_guess(model: str, vgs: np.ndarray, i_meas: np.ndarray, mask: np.ndarray,
                  ut: float = thermal_voltage()) -> np.ndarray:
    """Vectorised starting parameters from the data alone.

    ``linear``: the weighted straight line itself. Square-law family: a straight line
    through sqrt(ID) vs VGS over the upper part of each sweep (sqrt(ID) is linear in
    VGS for a square law). ``ekv`` adds n from the steepest log-current slope
    (weak inversion: d ln ID / dVGS = 1 / (n UT)).

    Returns
    -------
    ndarray, shape (B, P)
    """
    vgs = np.asarray(vgs, dtype=float)
    mask = np.asarray(mask, dtype=float)
    i_pos = np.where(mask > 0, np.abs(i_meas), 0.0)
    i_max = i_pos.max(axis=1, keepdims=True)
    if model == "linear":
        weights = mask / np.where(mask > 0, i_pos, 1.0) ** 2
        intercept, slope = _weighted_line(vgs, i_pos, weights)
        slope = np.where(np.isfinite(slope) & (slope > 0), slope, 1e-3)
        return np.stack([-intercept / slope, slope], axis=1)
    upper = mask * (i_pos >= 0.05 * i_max)
    # fall back to every fitted point where the upper part has fewer than 3
    upper = np.where(upper.sum(axis=1, keepdims=True) >= 3, upper, mask)
    intercept, slope = _weighted_line(vgs, np.sqrt(i_pos), upper)
    slope = np.where(np.isfinite(slope) & (slope > 0), slope, 1e-3)
    vth = -intercept / slope
    # the threshold cannot lie above the lowest conducting point of a hard-cut-off law
    v_low = np.where(mask > 0, vgs, np.inf).min(axis=1)
    vth = np.where(model in ("square", "theta"), np.minimum(vth, v_low - 1e-3), vth)
    kp = 2.0 * slope * slope
    if model == "square":
        return np.stack([vth, kp], axis=1)
    if model == "theta":
        return _theta_start(vgs, np.where(mask > 0, i_pos, 1.0), mask, vth, kp, ut)
    theta = np.full_like(vth, 0.01)
    # vth, KP, THETA from a theta-law fit over the strong-inversion part (upper currents),
    # where the EKV overdrive equals the plain one
    strong = mask * (i_pos >= 0.02 * i_max)
    strong = np.where(strong.sum(axis=1, keepdims=True) >= 4, strong, mask)
    theta_fit = solve_batch("theta", vgs, np.where(mask > 0, i_pos, 1.0), strong,
                            np.stack([vth, kp, theta], axis=1), ut=ut, max_iter=60, with_covariance=False)
    return ekv_start_from_theta(vgs, i_meas, mask, theta_fit.params, ut)


def ekv_start_from_theta(vgs, i_meas, mask, theta_params, ut: float = thermal_voltage()) -> np.ndarray:
    """ekv starting values: Vth, KP, THETA of a theta-law fit of the strong-inversion points, and n
    from the steepest log-current slope (weak inversion: d ln ID / dVGS = 1 / (n UT)).

    Returns
    -------
    ndarray, shape (B, 4)
    """
    vgs = np.asarray(vgs, dtype=float)
    mask = np.asarray(mask, dtype=float)
    i_pos = np.where(mask > 0, np.abs(i_meas), 0.0)
    vth, kp, theta = np.asarray(theta_params, dtype=float).T
    log_i = np.log(np.where(mask > 0, i_pos, 1.0))
    dv = np.diff(vgs, axis=1)
    both = (mask[:, 1:] > 0) & (mask[:, :-1] > 0) & (dv > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_slope = np.where(both, np.diff(log_i, axis=1) / np.where(both, dv, 1.0), 0.0)
    steepest = log_slope.max(axis=1)
    with np.errstate(divide="ignore"):
        n = np.clip(1.0 / (ut * np.maximum(steepest, 1e-9)), 1.05, 4.0)
    return np.stack([vth, kp, theta, n], axis=1)


def _theta_start(vgs, i_meas, mask, vth, kp, ut):
    # One square-law step pins the threshold (the near-threshold points dominate relative
    # residuals); then Vov^2 / (2 ID) = 1/KP + (THETA/KP) Vov is a straight line in Vov.
    square = solve_batch("square", vgs, i_meas, mask, np.stack([vth, kp], axis=1), ut=ut, max_iter=1,
                         with_covariance=False)
    vth = square.params[:, 0]
    vov = vgs - vth[:, None]
    above = mask * (vov > 0)
    y = np.where(above > 0, vov * vov / (2.0 * i_meas), 0.0)
    intercept, slope = _weighted_line(vov, y, above * i_meas)
    good = np.isfinite(intercept) & np.isfinite(slope) & (intercept > 0)
    kp_line = np.where(good, 1.0 / np.where(good, intercept, 1.0), square.params[:, 1])
    theta = np.where(good, np.clip(slope * kp_line, 0.0, 10.0), 0.0)
    return np.stack([vth, kp_line, theta], axis=1)


CHUNK_ROWS = 1024  # sweeps per solve: arrays of a few hundred kB stay in cache (about 2x faster than one huge batch)


def join_fits(parts: list[BatchFit]) -> BatchFit:
    """The fits of consecutive chunks of rows as one :class:`BatchFit`."""
    if len(parts) == 1:
        return parts[0]
    return BatchFit(model=parts[0].model, **{name: np.concatenate([getattr(p, name) for p in parts])
                                             for name in ("params", "covariance", "rss", "n_points", "iterations",
                                                          "converged")})


def fit_stacked(model: str, vgs: np.ndarray, i_meas: np.ndarray, mask: np.ndarray, start: np.ndarray | None = None,
                *, ut: float = thermal_voltage(), chunk_rows: int = CHUNK_ROWS,
                with_covariance: bool = True, sigma: np.ndarray | None = None) -> BatchFit:
    """Starting values (unless given) and :func:`solve_batch` over stacked sweeps, a chunk of rows at a time.

    Parameters
    ----------
    model : str
    vgs, i_meas, mask : ndarray, shape (B, N)
        As :func:`solve_batch`.
    start : ndarray, shape (B, P), optional
        Starting parameters; default :func:`initial_guess`.
    ut : float
        Thermal voltage (V) for the ekv model.
    chunk_rows : int
        Sweeps solved together.
    with_covariance : bool
        As :func:`solve_batch` (False for fits whose covariance nobody reads).
    sigma : ndarray, shape (B, N), optional
        As :func:`solve_batch`.

    Returns
    -------
    BatchFit
        For all B sweeps, in order (each row's numbers do not depend on the others in its chunk).
    """
    parts = []
    for lo in range(0, vgs.shape[0], chunk_rows):
        rows = slice(lo, lo + chunk_rows)
        begin = initial_guess(model, vgs[rows], i_meas[rows], mask[rows], ut=ut) if start is None else start[rows]
        parts.append(solve_batch(model, vgs[rows], i_meas[rows], mask[rows], begin, ut=ut,
                                 with_covariance=with_covariance, sigma=None if sigma is None else sigma[rows]))
    return join_fits(parts)
