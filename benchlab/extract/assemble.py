"""Turn a batched solve into :class:`FitResult` objects: uncertainties, thresholds, flags.

Everything that can be is computed for all sweeps of a batch at once (numpy over rows);
only the hysteresis check of sweeps with both directions, the optional bootstrap and the
final construction of each result run per sweep.
"""

from __future__ import annotations

import math

import numpy as np

from benchlab.errors import FitError
from benchlab.extract import diagnostics
from benchlab.extract.batch_thresholds import constant_current_stderr_batch, thresholds_batch
from benchlab.extract.engine import (PARAM_NAMES, BatchFit, _current_and_jacobian, lower_bounds, model_current,
                                     solve_batch)
from benchlab.extract.result import (FLAG_AT_CURRENT_OUTSIDE, FLAG_CC_OUTSIDE, FLAG_NON_MONOTONIC,
                                     FLAG_NOT_CONVERGED, FLAG_UNCERTAIN, FITTER_VERSION, FitResult)
from benchlab.models import T_NOMINAL_K, DeviceParams, overdrive_at_current, thermal_voltage


def vgs_and_gm(model: str, params: np.ndarray, current: float, ut: float = thermal_voltage()):
    """VGS (V) and gm (A/V) at ``current`` for each row of ``params`` (the formulas of :mod:`benchlab.models`)."""
    vth = params[:, 0]
    if model == "linear":
        gm = params[:, 1]
        return vth + current / gm, gm.copy()
    kp = params[:, 1]
    theta = params[:, 2] if model in ("theta", "ekv") else np.zeros_like(kp)
    q = overdrive_at_current(current, kp, theta)
    di_dq = 0.5 * kp * q * (2.0 + theta * q) / (1.0 + theta * q) ** 2
    if model != "ekv":
        return vth + q, di_dq
    scale = 2.0 * params[:, 3] * ut
    y = q / scale
    with np.errstate(divide="ignore"):
        vov = scale * (y + np.log(-np.expm1(-y)))  # inverse of the softplus overdrive
    return vth + vov, di_dq * 0.5 * (1.0 + np.tanh(0.5 * vov / scale))


def _delta_stderr(model, params, covariance, current, ut):
    # linearised propagation of VGS and gm at the operating current (forward differences keep
    # every parameter inside its physical range)
    v0, g0 = vgs_and_gm(model, params, current, ut)
    grad_v = np.zeros_like(params)
    grad_g = np.zeros_like(params)
    for j in range(params.shape[1]):
        step = 1e-6 * np.maximum(np.abs(params[:, j]), 1e-3)
        moved = params.copy()
        moved[:, j] += step
        v1, g1 = vgs_and_gm(model, moved, current, ut)
        grad_v[:, j], grad_g[:, j] = (v1 - v0) / step, (g1 - g0) / step
    var_v = np.einsum("bp,bpq,bq->b", grad_v, covariance, grad_v)
    var_g = np.einsum("bp,bpq,bq->b", grad_g, covariance, grad_g)
    return np.sqrt(np.clip(var_v, 0, None)), np.sqrt(np.clip(var_g, 0, None))


def _bootstrap(model, vgs, i_d, mask, p, resamples, seed, at_current, ut, sigma):
    # wild bootstrap (Wu, Annals of Statistics 14 (1986) 1261): each point keeps its own residual,
    # sign-flipped at random (Rademacher) and scaled by 1 / (1 - h) for its leverage, on the fitted
    # curve. A point's current residual holds its VGS noise seen through the slope, so both axes'
    # noise and their changing size along the sweep stay in every resample (drawing the residuals
    # of other points, as before, mixed near-threshold and high-current noise and read 2-3x small).
    used = mask > 0
    v = vgs[used]
    s = sigma[used] if sigma is not None else i_d[used]
    fitted, columns = _current_and_jacobian(model, v[None], p[None], ut)
    fitted = fitted[0]
    jac = np.stack([c[0] / s for c in columns], axis=-1)
    bread = np.linalg.pinv(jac.T @ jac)
    leverage = np.clip(np.einsum("np,pq,nq->n", jac, bread, jac), 0.0, 0.95)
    resid = (i_d[used] - fitted) / (1.0 - leverage)
    signs = np.random.default_rng(seed).choice((-1.0, 1.0), size=(resamples, v.size))
    synthetic = np.maximum(fitted[None, :] + signs * resid[None, :], 1e-30)
    fit = solve_batch(model, np.broadcast_to(v, synthetic.shape).copy(), synthetic, np.ones_like(synthetic),
                      np.tile(p, (resamples, 1)), ut=ut, with_covariance=False,
                      sigma=np.broadcast_to(s, synthetic.shape))
    spread = fit.params.std(axis=0, ddof=1)
    covariance = np.atleast_2d(np.cov(fit.params, rowvar=False))
    if at_current is None:
        return spread, None, None, covariance
    v_at, g_at = vgs_and_gm(model, fit.params, at_current, ut)
    return spread, float(np.std(g_at, ddof=1)), float(np.std(v_at, ddof=1)), covariance


# the size a standard error is judged against: the parameter itself, except the threshold (an
# absolute 0.5 V: a threshold near 0 V is no less well known), n, whose physical part is n - 1, and
# THETA, judged by what it does to the current (below)
def poorly_determined(names, values, errors, top_overdrive: float | None = None) -> list[str]:
    """Fitted parameters whose standard error exceeds half their size (every parameter is checked).

    Sizes: ``vth`` 1 V (so an error above 0.5 V), ``n`` its excess over the bound, n - 1, ``theta``
    its magnitude but at least the THETA that moves the current at the top of the fitted window by
    :data:`~benchlab.extract.diagnostics.THETA_EFFECT_FLOOR` (``top_overdrive``: VGS - Vth there, V),
    every other parameter its own magnitude.

    THETA's relative error says little where THETA is small: on a part with no mobility degradation
    (a SPICE level-1 card) THETA comes out 0.01 +- 0.04 1/V and its error is four times its size,
    yet its whole effect on the current, 1 / (1 + THETA Vov), is a percent or two at the top of the
    sweep, well inside what a good fit may miss. So THETA is poorly determined when its error is
    above half its size and also moves the current at the top of the window by more than half the
    floor: d ln ID / dTHETA = -Vov / (1 + THETA Vov).
    """
    loose = []
    for name, value, error in zip(names, values, errors):
        size = 1.0 if name == "vth" else (value - 1.0 if name == "n" else abs(value))
        if name == "theta" and top_overdrive is not None and top_overdrive > 0:
            # the THETA whose effect at the top is the floor, for this THETA's own denominator
            size = max(size, diagnostics.THETA_EFFECT_FLOOR * (1.0 + max(value, 0.0) * top_overdrive) / top_overdrive)
        if error is not None and np.isfinite(error) and error > 0.5 * size:
            loose.append(f"{name} {value:.4g} +- {error:.2g}")
    return loose


def _loose_rows(names, params, errors) -> np.ndarray:
    # the rows where :func:`poorly_determined` can find a parameter, all rows at once: its test on each parameter's
    # own size (THETA's size there is never smaller, so no row it flags is missed); the others need no call
    size = np.abs(params)
    for j, name in enumerate(names):
        if name == "vth":
            size[:, j] = 1.0
        elif name == "n":
            size[:, j] = params[:, j] - 1.0
    with np.errstate(invalid="ignore"):
        return np.any(np.isfinite(errors) & (errors > 0.5 * size), axis=1)


def _counts_per_row(masks) -> np.ndarray:
    # the number of True entries of each boolean array, all at once
    ends = np.cumsum([m.size for m in masks])
    total = np.concatenate(([0], np.cumsum(np.concatenate(masks))))
    return total[ends] - total[ends - np.array([m.size for m in masks])]


def correlations_batch(names, covariance) -> list[dict[str, float]]:
    """Correlation coefficients ``corr_<a>_<b>`` of the fitted parameters of each row, from their
    covariance (shape (B, P, P)).

    They travel with the standard errors (and into the library) so a Monte Carlo can draw the
    parameters together: a threshold and KP fitted to one sweep are strongly correlated. A pair is
    left out where either standard error is zero or the covariance is not finite.
    """
    covariance = np.asarray(covariance, float)
    sd = np.sqrt(np.clip(np.diagonal(covariance, axis1=1, axis2=2), 0.0, None))
    pairs = [(a, b) for a in range(len(names)) for b in range(a + 1, len(names))]
    if not pairs:
        return [{} for _ in range(covariance.shape[0])]
    first, second = (np.array(side) for side in zip(*pairs))
    values = covariance[:, first, second]
    with np.errstate(divide="ignore", invalid="ignore"):
        coefficient = np.clip(values / (sd[:, first] * sd[:, second]), -1.0, 1.0)
    present = (sd[:, first] > 0) & (sd[:, second] > 0) & np.isfinite(values)
    keys = [f"corr_{names[a]}_{names[b]}" for a, b in pairs]
    return [{k: c for k, c, ok in zip(keys, row, kept) if ok}
            for row, kept in zip(coefficient.tolist(), present.tolist())]


def _sensitivities(model, vgs, i_d, params, ut):
    # gm / ID of the fitted curve at each VGS (every model's first parameter is the threshold), and
    # the Jacobian of the relative residual fitted / measured - 1
    current, columns = _current_and_jacobian(model, vgs, params, ut)
    with np.errstate(divide="ignore", invalid="ignore"):
        gm_over_id = np.where(current > 0, -columns[0] / np.where(current > 0, current, 1.0), 0.0)
    # a parameter resting on its bound (THETA = 0, n = 1) cannot move further: its column would let
    # the regression bend it past the bound (negative THETA looks just like heating)
    free = params > lower_bounds(model) + 1e-12
    return gm_over_id, [c / i_d * free[:, j:j + 1] for j, c in enumerate(columns)]


def _optional_list(values) -> list[float | None]:
    # a row of numbers as plain floats, None where not finite
    return [v if math.isfinite(v) else None for v in np.asarray(values, float).tolist()]


def assemble(model: str, sweeps, fit: BatchFit, stacked, chosen_by: list[str], *, at_current, cc_current,
             reasons: list[str], criteria: list[dict], bootstrap: int, seed: int,
             temperature_k: float = T_NOMINAL_K, sigma=None, directions=None) -> list[FitResult]:
    """Results of one model's batched fit.

    Parameters
    ----------
    model : str
    sweeps : list of Sweep
        The sweeps, in the rows' order.
    fit : BatchFit
    stacked : (vgs, id, mask, valid) ndarrays, shape (B, N)
        Each sweep's points (its fitted direction), the window as ``mask``, real (not padding)
        points as ``valid``.
    chosen_by : list of str
        ``default`` or ``user`` per sweep (how the window was chosen).
    at_current, cc_current, bootstrap, seed, temperature_k
        As :func:`benchlab.extract.fit_batch`.
    reasons, criteria : list
        The model-choice explanation and AICc table per sweep.
    sigma : ndarray, shape (B, N), optional
        The point standard deviations (A) the fit was weighted with (default: relative residuals).
    directions : list of (ndarray, ndarray), optional
        Per sweep, which of its points were taken going up and going down (default: from the sweeps).
    """
    vgs, i_d, mask, points = stacked
    used = mask > 0
    ut = thermal_voltage(temperature_k)
    broken = np.flatnonzero(~np.all(np.isfinite(fit.params), axis=1))
    if broken.size:
        where = sweeps[broken[0]].source or f"sweep {broken[0] + 1}"
        raise FitError(f"{where}: the {model} fit diverged (parameters are not finite); try another model "
                       "or a window")
    params = fit.params
    names = PARAM_NAMES[model]
    fitted = model_current(model, vgs, params, ut)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(used, fitted / i_d - 1.0, 0.0)
    n_used = used.sum(axis=1)
    rms_rel = np.sqrt((rel * rel).sum(axis=1) / np.maximum(n_used, 1))
    rms_abs = np.sqrt(np.where(used, (fitted - i_d) ** 2, 0.0).sum(axis=1) / np.maximum(n_used, 1))
    param_sd = np.sqrt(np.clip(np.diagonal(fit.covariance, axis1=1, axis2=2), 0.0, None))
    vth = params[:, 0]
    theta = params[:, 2] if model in ("theta", "ekv") else np.zeros_like(vth)
    slope_n = params[:, 3] if model == "ekv" else np.zeros_like(vth)
    if at_current is not None:
        vgs_at, gm_at = vgs_and_gm(model, params, at_current, ut)
        v_sd, g_sd = _delta_stderr(model, params, fit.covariance, at_current, ut)
    vgs_cc_model, gm_cc_model = vgs_and_gm(model, params, cc_current, ut)
    threshold_errors: dict = {}
    thresholds = thresholds_batch(vgs, i_d, points, cc_current, threshold_errors)
    # VGS error of an interpolated point: the readings' own scatter in VGS around that current
    # (model-free, like the threshold itself); with too few readings there, one reading's relative
    # noise over the fitted curve's local log-slope
    vth_cc_sd = constant_current_stderr_batch(vgs, i_d, points, cc_current)
    if model != "linear":
        _, gm_cc = vgs_and_gm(model, params, cc_current, ut)
        with np.errstate(divide="ignore", invalid="ignore"):
            vth_cc_sd = np.where(np.isfinite(vth_cc_sd), vth_cc_sd, rms_rel / (gm_cc / cc_current))
    i_lo = np.where(points, i_d, np.inf).min(axis=1)
    i_hi = np.where(points, i_d, -np.inf).max(axis=1)
    found = [[] for _ in sweeps]
    gm_over_id, jacobian = _sensitivities(model, vgs, i_d, params, ut)
    if directions is None:
        directions = [(sweep.direction == "up", sweep.direction == "down") for sweep in sweeps]
    # points taken going up and going down, per sweep (both passes: the hysteresis check)
    n_up, n_down = (_counts_per_row([pair[k] for pair in directions]) for k in (0, 1))
    both_rows = ((n_up > 0) & (n_down > 0)).tolist()
    order_v, order_i, order_valid = _rising_pass_in_order(sweeps, directions, n_up.tolist())
    for checks in (diagnostics.window_checks(model, vgs, i_d, used, vth), diagnostics.fit_quality(rms_rel),
                   diagnostics.monotonic_check(order_v, order_i, order_valid),
                   diagnostics.bound_checks(model, theta, slope_n),
                   diagnostics.power_drift_check(vgs, i_d, used, rel, gm_over_id, temperature_k, jacobian)):
        for row, items in enumerate(checks):
            found[row] += items
    # everything a result holds, as plain Python numbers for all rows at once (NaN/inf become None)
    params_rows, sd_rows = params.tolist(), param_sd.tolist()
    corr_rows = correlations_batch(names, fit.covariance)
    cc_rows = _optional_list(vth_cc_sd)
    sd_threshold_rows = _optional_list(threshold_errors["second_derivative_sqrt"])
    threshold_rows = {k: _optional_list(v) for k, v in thresholds.items()}
    threshold_items = list(threshold_rows.items())
    vgs_cc_rows, gm_cc_rows = _optional_list(vgs_cc_model), _optional_list(gm_cc_model)
    theta_rows, n_rows = theta.tolist(), slope_n.tolist()
    rms_abs_rows, rms_rel_rows, used_rows = rms_abs.tolist(), rms_rel.tolist(), n_used.tolist()
    i_lo_rows, i_hi_rows = i_lo.tolist(), i_hi.tolist()
    window_rows = np.stack([np.where(used, i_d, np.inf).min(axis=1), np.where(used, i_d, -np.inf).max(axis=1),
                            np.where(used, vgs, np.inf).min(axis=1), np.where(used, vgs, -np.inf).max(axis=1)],
                           axis=1).tolist()
    if at_current is not None:
        gm_rows, v_at_rows = gm_at.tolist(), vgs_at.tolist()
        gm_sd_rows, vgs_sd_rows = _optional_list(g_sd), _optional_list(v_sd)
    converged_rows, iteration_rows = fit.converged.tolist(), fit.iterations.tolist()
    loose_rows = _loose_rows(names, params, param_sd).tolist()
    temperature = float(temperature_k)
    swing = ut * math.log(10.0) * 1e3
    results = []
    for row, sweep in enumerate(sweeps):
        p = params_rows[row]
        device = DeviceParams(model, *p, temperature_k=temperature) if model != "linear" else \
            DeviceParams(model, p[0], gm=p[1], temperature_k=temperature)
        sd = dict(zip(names, sd_rows[row]))
        correlation = corr_rows[row]
        gm = v_at = gm_sd = vgs_sd = None
        if at_current is not None:
            gm, v_at, gm_sd, vgs_sd = gm_rows[row], v_at_rows[row], gm_sd_rows[row], vgs_sd_rows[row]
        method = "covariance"
        if bootstrap:
            spread, gm_sd, vgs_sd, covariance = _bootstrap(model, vgs[row], i_d[row], mask[row], params[row],
                                                           int(bootstrap), seed, at_current, ut,
                                                           None if sigma is None else sigma[row])
            sd = dict(zip(names, spread.tolist()))
            correlation = correlations_batch(names, covariance[None])[0]
            method = f"bootstrap/{int(bootstrap)}"
        row_thresholds = {"model": device.vth}
        for key, values in threshold_items:
            row_thresholds[key] = values[row]
        vth_cc = row_thresholds["constant_current"]
        flags_found = found[row]
        if vth_cc is None:
            flags_found.append((FLAG_CC_OUTSIDE, f"{cc_current * 1e6:g} uA lies outside the measured currents "
                                                 f"({i_lo_rows[row]:.3g} to {i_hi_rows[row]:.3g} A); not extrapolated"))
        if at_current is not None and not (i_lo_rows[row] <= at_current <= i_hi_rows[row]):
            flags_found.append((FLAG_AT_CURRENT_OUTSIDE, f"gm at {at_current:g} A comes from the model outside "
                                                         "the measured currents"))
        if sweep.skipped.get("noise_floor"):  # a note, not a flag: nothing is wrong with the fit
            flags_found.append((None, f"{sweep.skipped['noise_floor']} reading(s) at the noise floor (below "
                                      "5 x the RMS of the negative readings: the part not yet conducting) left out"))
        if sweep.fold_backs:
            row_no, v_fold, i_fold = sweep.fold_backs[0]
            flags_found.append((FLAG_NON_MONOTONIC, f"VGS and ID fall together far beyond the sweep's noise "
                                                    f"({len(sweep.fold_backs)} place(s), first at row {row_no}, "
                                                    f"VGS={v_fold:.4f} V, ID={i_fold:.4g} A): likely a heating "
                                                    "fold-back"))
        shift = None
        if both_rows[row]:  # both passes measured
            up_v, up_i = sweep.select("up")
            down_v, down_i = sweep.select("down")
            shift = diagnostics.hysteresis(up_v, up_i, down_v, down_i)
            flags_found += diagnostics.hysteresis_check(shift)
        if not converged_rows[row]:
            flags_found.append((FLAG_NOT_CONVERGED, f"the solver stopped after {iteration_rows[row]} iterations"))
        loose = (poorly_determined(names, p, [sd[name] for name in names], window_rows[row][3] - p[0])
                 if bootstrap or loose_rows[row] else None)
        if loose:
            flags_found.append((FLAG_UNCERTAIN, "standard error above half the parameter: " + ", ".join(loose)))
        stderr = {"vth": sd.get("vth"), "kp": sd.get("kp") if model != "linear" else None,
                  "theta": sd.get("theta"), "n": sd.get("n"), "gm": gm_sd,
                  "vth_cc": cc_rows[row] if vth_cc is not None else None, "vgs_at_current": vgs_sd,
                  "vth_sd": sd_threshold_rows[row]}
        stderr.update(correlation)
        i_min, i_max, v_min, v_max = window_rows[row]
        window = {"i_min": i_min, "i_max": i_max, "vgs_min": v_min, "vgs_max": v_max,
                  "points": used_rows[row], "chosen_by": chosen_by[row]}
        n_value = n_rows[row]
        results.append(FitResult(
            model=model, params=device, vth=device.vth, kp=device.kp, theta=theta_rows[row],
            n=n_value, slope_mv_per_decade=n_value * swing if model == "ekv" else None,
            gm=gm, at_current=at_current, vgs_at_current=v_at, vth_cc=vth_cc, cc_current=float(cc_current),
            rms_residual=rms_abs_rows[row], rms_relative=rms_rel_rows[row],
            vgs_at_cc=vgs_cc_rows[row], gm_at_cc=gm_cc_rows[row], stderr=stderr,
            stderr_method=method,
            flags=tuple(dict.fromkeys(code for code, _ in flags_found if code)) if flags_found else (),
            notes=tuple(n for _, n in flags_found) if flags_found else (),
            thresholds=row_thresholds, window=window, reason=reasons[row],
            criteria={k: (v if math.isfinite(v) else None) for k, v in criteria[row].items()} if criteria[row] else {},
            points_used=used_rows[row], points_skipped=int(sum(sweep.skipped.values())), hysteresis_v=shift,
            fitter_version=FITTER_VERSION))
    return results


def _rising_pass_in_order(sweeps, directions, any_up):
    # the fitted pass in measurement order, a falling pass read backwards
    passes = []
    for sweep, (up, down), has_up in zip(sweeps, directions, any_up):
        if has_up:
            passes.append((sweep.vgs, sweep.id) if up.size == sweep.vgs.size and has_up == up.size
                          else (sweep.vgs[up], sweep.id[up]))
        else:
            passes.append((sweep.vgs[down][::-1], sweep.id[down][::-1]))
    sizes = np.array([v.size for v, _ in passes])
    width = int(sizes.max())
    valid = np.arange(width)[None, :] < sizes[:, None]  # each row's points first
    vgs = np.zeros((len(passes), width))
    i_d = np.ones((len(passes), width))
    vgs[valid] = np.concatenate([v for v, _ in passes])
    i_d[valid] = np.concatenate([i for _, i in passes])
    return vgs, i_d, valid
