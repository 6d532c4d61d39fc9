"""Fitting sweeps: windows, automatic model choice, uncertainties, flags.

:func:`fit_batch` fits any number of sweeps in one vectorised pass per model (see
:mod:`benchlab.extract.engine`); :func:`fit_sweep` is a batch of one. Both are pure: they
take numbers (or :class:`~benchlab.extract.sweepdata.Sweep` objects) and return
:class:`~benchlab.extract.result.FitResult` objects.

Automatic choice: square, theta and ekv are fitted to the same points with the same
error model (relative residuals) and ranked by the small-sample Akaike information
criterion AICc = N ln(RSS/N) + 2k + 2k(k+1)/(N-k-1) (Hurvich & Tsai, Biometrika 76 (1989)
297-307). Among models within 2 AICc units of the best, the one with fewest parameters
wins (Burnham & Anderson, Model Selection and Multimodel Inference, 2nd ed. 2002,
section 2.6: a difference below 2 is no real support for the richer model).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchlab.errors import FitError, InputError
from benchlab.extract import diagnostics
from benchlab.extract.engine import PARAM_NAMES, initial_guess, model_current, solve_batch
from benchlab.extract.result import (FLAG_AT_CURRENT_OUTSIDE, FLAG_CC_OUTSIDE, FLAG_NOT_CONVERGED,
                                     FLAG_UNCERTAIN, FITTER_VERSION, FitResult)
from benchlab.extract.sweepdata import Sweep, validate_points
from benchlab.extract.thresholds import all_thresholds
from benchlab.models import MODEL_NAMES, DeviceParams, thermal_voltage

DEFAULT_CC_CURRENT = 250e-6
MODEL_CHOICES = ("auto",) + MODEL_NAMES
AUTO_CANDIDATES = ("square", "theta", "ekv")
AICC_MARGIN = 2.0
# The strong-inversion window of the square-law family: the top two decades of current.
STRONG_WINDOW_DECADES = 2.0
LINEAR_HALF_SPAN = 2.0  # the linear model's default window: operating current / 2 .. x 2


@dataclass(frozen=True)
class _Points:
    sweep: Sweep
    vgs: np.ndarray  # fit points (one direction, sorted by VGS)
    id: np.ndarray


def _as_sweep(item) -> Sweep:
    if isinstance(item, Sweep):
        return item
    if isinstance(item, dict):
        return validate_points(item["vgs"], item["id"], item.get("direction"), source=item.get("source"))
    if isinstance(item, (tuple, list)) and len(item) in (2, 3):
        return validate_points(item[0], item[1], item[2] if len(item) == 3 else None)
    raise InputError("each sweep must be a Sweep, a dict with 'vgs' and 'id', or a (vgs, id) pair")


def _check_options(model, at_current, cc_current, window, bootstrap):
    if model not in MODEL_CHOICES:
        raise InputError(f"unknown model '{model}' (choose from {', '.join(MODEL_CHOICES)})")
    for name, value in (("at_current", at_current), ("cc_current", cc_current)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise InputError(f"{name} must be a positive current in A (got {value})")
    if window is not None:
        lo, hi = window
        if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
            raise InputError(f"window must be two currents 0 < low < high in A (got {lo}, {hi})")
    if int(bootstrap) < 0:
        raise InputError("bootstrap must be 0 (off) or a number of resamples")


def _window(model: str, i_d: np.ndarray, window, at_current) -> tuple[np.ndarray, str]:
    if window is not None:
        return (i_d >= window[0]) & (i_d <= window[1]), "user"
    if model == "ekv":
        return np.ones(i_d.size, dtype=bool), "default"
    if model == "linear":
        centre = at_current if at_current is not None else i_d.max() / 10.0
        span = LINEAR_HALF_SPAN
        while True:
            mask = (i_d >= centre / span) & (i_d <= centre * span)
            if mask.sum() >= 4 or span >= 10.0:
                return mask, "default"
            span *= math.sqrt(2.0)
    return i_d >= i_d.max() * 10.0 ** -STRONG_WINDOW_DECADES, "default"


def _stack(points: list[_Points], masks: list[np.ndarray]):
    width = max(p.vgs.size for p in points)
    vgs = np.zeros((len(points), width))
    i_d = np.ones((len(points), width))
    mask = np.zeros((len(points), width))
    for row, (p, m) in enumerate(zip(points, masks)):
        vgs[row, :p.vgs.size] = p.vgs
        vgs[row, p.vgs.size:] = p.vgs[-1]
        i_d[row, :p.id.size] = p.id
        mask[row, :p.vgs.size] = m
    return vgs, i_d, mask


def _aicc(rss: float, n: float, k: int) -> float:
    if n - k - 1 <= 0:
        return math.inf
    if rss <= 0:
        return -math.inf
    return n * math.log(rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)


def _choose(criteria: dict[str, float]) -> tuple[str, str]:
    finite = {m: c for m, c in criteria.items() if math.isfinite(c)}
    if not finite:
        return "square", "too few points to compare models; square law used"
    best = min(finite.values())
    chosen = next(m for m in AUTO_CANDIDATES if m in finite and finite[m] <= best + AICC_MARGIN)
    others = ", ".join(f"{m} {finite[m] - finite[chosen]:+.1f}" for m in AUTO_CANDIDATES
                       if m in finite and m != chosen)
    why = ("lowest AICc" if finite[chosen] == best
           else f"within {AICC_MARGIN:g} of the lowest AICc with fewer parameters")
    return chosen, f"{chosen}: {why} (AICc relative to it: {others})"


def _fit_model(model: str, points: list[_Points], masks: list[np.ndarray], start=None):
    vgs, i_d, mask = _stack(points, masks)
    need = len(PARAM_NAMES[model]) + 1
    for p, m in zip(points, masks):
        if m.sum() < need:
            where = f"{p.sweep.source}: " if p.sweep.source else ""
            raise FitError(f"{where}only {int(m.sum())} points in the fit window; the {model} model needs "
                           f"at least {need}")
    if start is None:
        start = initial_guess(model, vgs, i_d, mask)
    return solve_batch(model, vgs, i_d, mask, start), (vgs, i_d, mask)


def fit_batch(sweeps, model: str = "auto", *, at_current: float | None = None,
              cc_current: float = DEFAULT_CC_CURRENT, window=None, bootstrap: int = 0,
              seed: int = 0) -> list[FitResult]:
    """Fit many sweeps at once (one vectorised solve per model, not a loop of fits).

    Parameters
    ----------
    sweeps : sequence
        :class:`Sweep` objects, ``(vgs, id)`` pairs or dicts with ``vgs`` and ``id``.
    model : str
        ``auto`` (choose by AICc), ``linear``, ``square``, ``theta`` or ``ekv``.
    at_current : float, optional
        Operating current (A) for ``gm`` and ``vgs_at_current`` (and the centre of the
        linear model's window).
    cc_current : float
        Constant-current threshold criterion (A), default 250 uA.
    window : (float, float), optional
        Fit only points with low <= ID <= high (A). Default: the top two decades for the
        square-law family, every point for ekv, ``at_current`` / 2 .. x 2 for linear.
    bootstrap : int
        Residual-bootstrap resamples for the standard errors (0: from the fit covariance).
    seed : int
        Seed of the bootstrap's random numbers (results are reproducible).

    Returns
    -------
    list of FitResult
        In the order of ``sweeps``.

    Raises
    ------
    InputError
        Bad options or bad points.
    FitError
        A window holds too few points for the model.
    """
    _check_options(model, at_current, cc_current, window, bootstrap)
    points = []
    for item in sweeps:
        sweep = _as_sweep(item)
        vgs, i_d = sweep.fit_points()
        points.append(_Points(sweep, vgs, i_d))
    if not points:
        return []
    final_model = [model] * len(points)
    reasons = ["requested"] * len(points)
    criteria: list[dict] = [{} for _ in points]
    fits: dict[str, tuple] = {}
    if model == "auto":
        masks = [_window("square", p.id, window, at_current)[0] for p in points]
        for candidate in AUTO_CANDIDATES:
            usable = [b for b, m in enumerate(masks) if m.sum() >= len(PARAM_NAMES[candidate]) + 2]
            if not usable:
                continue
            fit, _ = _fit_model(candidate, [points[b] for b in usable], [masks[b] for b in usable])
            for row, b in enumerate(usable):
                criteria[b][candidate] = _aicc(float(fit.rss[row]), float(fit.n_points[row]),
                                               len(PARAM_NAMES[candidate]))
            fits[candidate] = (fit, usable)
        for b in range(len(points)):
            final_model[b], reasons[b] = _choose(criteria[b])
    results: list[FitResult | None] = [None] * len(points)
    for name in MODEL_NAMES:
        group = [b for b, m in enumerate(final_model) if m == name]
        if not group:
            continue
        masks = [_window(name, points[b].id, window, at_current) for b in group]
        start = None
        if name in fits:
            # reuse the comparison fit as the start (it is the answer when the window is the same)
            fit_c, usable = fits[name]
            start = np.array([fit_c.params[usable.index(b)] for b in group])
        fit, stacked = _fit_model(name, [points[b] for b in group], [m for m, _ in masks], start)
        for row, b in enumerate(group):
            results[b] = _result(name, points[b], fit, row, stacked, masks[row][1], at_current, cc_current,
                                 reasons[b], criteria[b], bootstrap, seed)
    return results


def fit_sweep(vgs, id=None, *, model: str = "auto", at_current: float | None = None,  # noqa: A002 (trade name)
              cc_current: float = DEFAULT_CC_CURRENT, window=None, bootstrap: int = 0,
              direction=None, source: str | None = None, seed: int = 0) -> FitResult:
    """Fit one sweep of a diode-connected part.

    Parameters
    ----------
    vgs : array_like or Sweep
        Gate-source voltages (V), or a validated :class:`Sweep` (then ``id`` is omitted).
    id : array_like
        Drain currents (A > 0).
    model, at_current, cc_current, window, bootstrap, seed
        See :func:`fit_batch`.
    direction : array_like of str, optional
        ``up``/``down`` per point (enables the hysteresis check).
    source : str, optional
        Name to quote in error messages.

    Returns
    -------
    FitResult
    """
    if isinstance(vgs, Sweep):
        sweep = vgs
    else:
        if id is None:
            raise InputError("fit_sweep needs both vgs and id")
        sweep = validate_points(vgs, id, direction, source=source)
    return fit_batch([sweep], model, at_current=at_current, cc_current=cc_current, window=window,
                     bootstrap=bootstrap, seed=seed)[0]


def _device(model: str, p: np.ndarray) -> DeviceParams:
    values = dict(zip(PARAM_NAMES[model], (float(x) for x in p)))
    return DeviceParams(model=model, **values)


def _derived(model: str, p: np.ndarray, at_current):
    device = _device(model, p)
    if at_current is None:
        return device, None, None
    return device, float(device.gm_at(at_current)), float(device.vgs_at(at_current))


def _delta_stderr(model: str, p: np.ndarray, cov: np.ndarray, at_current) -> tuple[float | None, float | None]:
    # linearised error propagation of gm and VGS at the operating current (forward
    # differences keep every parameter inside its physical range)
    if at_current is None:
        return None, None
    _, gm0, v0 = _derived(model, p, at_current)
    grads = np.zeros((2, p.size))
    for j in range(p.size):
        step = 1e-6 * max(abs(p[j]), 1e-3)
        q = p.copy()
        q[j] += step
        _, gm1, v1 = _derived(model, q, at_current)
        grads[:, j] = [(gm1 - gm0) / step, (v1 - v0) / step]
    var = np.einsum("ip,pq,iq->i", grads, cov, grads)
    return tuple(float(math.sqrt(v)) if v >= 0 and math.isfinite(v) else None for v in var)


def _bootstrap(model: str, vgs, i_d, mask, p, resamples: int, seed: int, at_current):
    # residual bootstrap: resample the relative residuals onto the fitted curve, refit all
    # resamples in one batched solve
    used = mask > 0
    v, fitted = vgs[used], model_current(model, vgs[None, used], p[None])[0]
    rel = i_d[used] / fitted - 1.0
    rel = rel - rel.mean()
    rng = np.random.default_rng(seed)
    draws = rng.choice(rel, size=(resamples, rel.size), replace=True)
    synthetic = np.maximum(fitted[None, :] * (1.0 + draws), 1e-30)
    tiled_v = np.broadcast_to(v, synthetic.shape).copy()
    fit = solve_batch(model, tiled_v, synthetic, np.ones_like(synthetic), np.tile(p, (resamples, 1)))
    spread = fit.params.std(axis=0, ddof=1)
    derived = [_derived(model, q, at_current)[1:] for q in fit.params] if at_current is not None else []
    gm_sd = float(np.std([d[0] for d in derived], ddof=1)) if derived else None
    v_sd = float(np.std([d[1] for d in derived], ddof=1)) if derived else None
    return spread, gm_sd, v_sd


def _result(model, pts: _Points, fit, row, stacked, chosen_by, at_current, cc_current, reason, criteria,
            bootstrap, seed) -> FitResult:
    vgs_s, id_s, mask_s = stacked[0][row], stacked[1][row], stacked[2][row]
    p = fit.params[row]
    names = PARAM_NAMES[model]
    device, gm, vgs_at = _derived(model, p, at_current)
    if model == "linear" and gm is None:
        gm = float(device.gm)  # the linear model's own slope
    used = mask_s > 0
    v_used, i_used = vgs_s[used], id_s[used]
    fitted = model_current(model, v_used[None], p[None])[0]
    rel = fitted / i_used - 1.0
    n_used = int(used.sum())
    rms_rel = float(math.sqrt(fit.rss[row] / n_used))
    rms_abs = float(np.sqrt(np.mean((fitted - i_used) ** 2)))
    cov = fit.covariance[row]
    param_sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    gm_sd, v_sd = _delta_stderr(model, p, cov, at_current)
    method = "covariance"
    if bootstrap:
        param_sd, gm_sd, v_sd = _bootstrap(model, vgs_s, id_s, mask_s, p, int(bootstrap), seed, at_current)
        method = f"bootstrap/{int(bootstrap)}"
    sd = dict(zip(names, (float(x) for x in param_sd)))
    thresholds = {"model": float(device.vth), **all_thresholds(pts.vgs, pts.id, cc_current)}
    vth_cc = thresholds["constant_current"]
    found: list[tuple[str, str]] = []
    vth_cc_sd = None
    if vth_cc is None:
        found.append((FLAG_CC_OUTSIDE, f"{cc_current * 1e6:g} uA lies outside the measured currents "
                                       f"({pts.id.min():.3g} to {pts.id.max():.3g} A); not extrapolated"))
    else:
        # noise of one reading over the local log-slope: the VGS error of an interpolated point
        log_slope = float(device.gm_at(cc_current) / cc_current) if model != "linear" else None
        if log_slope and log_slope > 0:
            vth_cc_sd = rms_rel / log_slope
    if at_current is not None and not (pts.id.min() <= at_current <= pts.id.max()):
        found.append((FLAG_AT_CURRENT_OUTSIDE, f"gm at {at_current:g} A comes from the model outside the "
                                               "measured currents"))
    theta = float(device.theta) if model in ("theta", "ekv") else 0.0
    n = float(device.n) if model == "ekv" else 0.0
    found += diagnostics.window_checks(model, v_used, i_used, device.vth)
    found += diagnostics.fit_quality(rms_rel)
    if np.any(pts.sweep.direction == "up"):
        found += diagnostics.monotonic_check(*pts.sweep.in_order("up"))
    else:  # a falling pass read backwards is a rising one
        found += diagnostics.monotonic_check(*(a[::-1] for a in pts.sweep.in_order("down")))
    found += diagnostics.bound_checks(model, theta, n)
    found += diagnostics.power_drift_check(v_used, i_used, rel)
    shift = None
    if pts.sweep.has_both_directions:
        up_v, up_i = pts.sweep.select("up")
        down_v, down_i = pts.sweep.select("down")
        shift = diagnostics.hysteresis(up_v, up_i, down_v, down_i)
        found += diagnostics.hysteresis_check(shift)
    if not fit.converged[row]:
        found.append((FLAG_NOT_CONVERGED, f"the solver stopped after {int(fit.iterations[row])} iterations"))
    size = {"vth": 1.0, "kp": device.kp, "gm": device.gm}
    if any(name in sd and sd[name] > 0.5 * abs(ref) for name, ref in size.items() if ref):
        found.append((FLAG_UNCERTAIN, "a standard error exceeds half its parameter (vth: 0.5 V)"))
    flags = tuple(dict.fromkeys(code for code, _ in found))
    stderr = {"vth": sd.get("vth"), "kp": sd.get("kp"), "theta": sd.get("theta"), "n": sd.get("n"),
              "gm": gm_sd if at_current is not None else None, "vth_cc": vth_cc_sd, "vgs_at_current": v_sd}
    if model == "linear":
        stderr["kp"] = None
        stderr["gm"] = gm_sd if at_current is not None else sd.get("gm")
    window = {"i_min": float(i_used.min()), "i_max": float(i_used.max()), "vgs_min": float(v_used.min()),
              "vgs_max": float(v_used.max()), "points": n_used, "chosen_by": chosen_by}
    slope = n * thermal_voltage() * math.log(10.0) * 1e3 if model == "ekv" else None
    return FitResult(
        model=model, params=device, vth=float(device.vth), kp=float(device.kp), theta=theta, n=n,
        slope_mv_per_decade=slope, gm=gm, at_current=at_current, vgs_at_current=vgs_at, vth_cc=vth_cc,
        cc_current=float(cc_current), rms_residual=rms_abs, rms_relative=rms_rel, stderr=stderr,
        stderr_method=method, flags=flags, notes=tuple(note for _, note in found), thresholds=thresholds,
        window=window, reason=reason, criteria={k: (v if math.isfinite(v) else None) for k, v in criteria.items()},
        points_used=n_used, points_skipped=int(sum(pts.sweep.skipped.values())), hysteresis_v=shift,
        fitter_version=FITTER_VERSION)
