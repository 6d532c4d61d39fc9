"""Fitting sweeps: windows, automatic model choice, uncertainties, flags.

:func:`fit_batch` fits any number of sweeps in one vectorised pass per model (see
:mod:`benchlab.extract.engine`); :func:`fit_sweep` is a batch of one. Both are pure: they
take numbers (or :class:`~benchlab.extract.sweepdata.Sweep` objects) and return
:class:`~benchlab.extract.result.FitResult` objects.

Automatic choice: square, theta and ekv are fitted to the same points and weighted alike (each
point's noise estimated once from the global model, see :func:`_rank_on_common_weights`). ekv wins
where its small-sample Akaike information criterion AICc (Hurvich & Tsai, Biometrika 76 (1989)
297-307) beats both square-law forms by more than 2 (Burnham & Anderson, Model Selection and
Multimodel Inference, 2nd ed. 2002, section 2.6: a difference below 2 is no real support for the
richer model). Between the nested pair the THETA law is reported whenever its fit converges with
THETA off its lower bound 0, the square law otherwise (see :func:`_choose`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchlab.choices import DEFAULT_CC_CURRENT, MODEL_CHOICES
from benchlab.errors import FitError, InputError
from benchlab.extract.assemble import assemble
from benchlab.extract.diagnostics import MIN_DECADES
from benchlab.extract.eiv import effective_variance_fit
from benchlab.extract.engine import CHUNK_ROWS, PARAM_NAMES, ekv_start_from_theta, fit_stacked
from benchlab.extract.result import FitResult
from benchlab.extract.sweepdata import Sweep, validate_points
from benchlab.models import MODEL_NAMES, T_NOMINAL_K, thermal_voltage

AUTO_CANDIDATES = ("square", "theta", "ekv")
AICC_MARGIN = 2.0
# The strong-inversion window of the square-law family: the top two decades of current.
STRONG_WINDOW_DECADES = 2.0
LINEAR_HALF_SPAN = 2.0  # the linear model's default window: operating current / 2 .. x 2


@dataclass(frozen=True)
class _Points:
    sweep: Sweep
    vgs: np.ndarray  # fit points (one direction, in order of rising current)
    id: np.ndarray
    up: np.ndarray  # each point of the sweep: taken going up, going down
    down: np.ndarray


def _fit_points(sweeps: list[Sweep]) -> list[_Points]:
    """Every sweep's fit points (as :meth:`Sweep.fit_points`: the up pass when there is one, sorted by current
    then VGS), the directions of all sweeps compared in one pass."""
    if not sweeps:
        return []
    directions = np.concatenate([s.direction for s in sweeps])
    sizes = np.array([s.direction.size for s in sweeps])
    ends = np.cumsum(sizes)
    ups, downs = directions == "up", directions == "down"
    # a sweep taken upwards only, its current rising point by point, is in the fit's order already
    currents = np.concatenate([s.id for s in sweeps])
    out_of_order = np.concatenate(([0], np.cumsum(~ups[1:] | (np.diff(currents) <= 0))))
    starts = ends - sizes
    ready = (sizes > 0) & ups[np.minimum(starts, ups.size - 1)] & \
        (out_of_order[np.maximum(ends - 1, starts)] - out_of_order[starts] == 0)
    out = []
    for sweep, up, down, in_order in zip(sweeps, np.split(ups, ends[:-1]), np.split(downs, ends[:-1]), ready.tolist()):
        if in_order:
            out.append(_Points(sweep, sweep.vgs, sweep.id, up, down))
            continue
        keep = up if up.any() else down
        vgs, i_d = sweep.vgs[keep], sweep.id[keep]
        order = np.lexsort((vgs, i_d))
        out.append(_Points(sweep, vgs[order], i_d[order], up, down))
    return out


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
    if int(bootstrap) < 0 or int(bootstrap) == 1:
        raise InputError(f"bootstrap must be 0 (off) or a number of resamples, at least 2 (got {bootstrap}); "
                         "a few hundred give steady error bars")


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
    sizes = np.array([p.vgs.size for p in points])
    width = int(sizes.max())
    valid = np.arange(width)[None, :] < sizes[:, None]  # each row's points first, then padding
    vgs = np.empty((len(points), width))
    vgs[valid] = np.concatenate([p.vgs for p in points])
    # padding repeats a row's last VGS (any real value keeps the model finite); currents pad with 1
    vgs[~valid] = np.repeat(vgs[np.arange(len(points)), sizes - 1], width - sizes)
    i_d = np.ones((len(points), width))
    i_d[valid] = np.concatenate([p.id for p in points])
    mask = np.zeros((len(points), width))
    mask[valid] = np.concatenate(masks)
    return vgs, i_d, mask, valid


def _window_only(vgs, i_d, mask):
    """The fit window's points moved to the left of each row, the rows cut to the widest window: the
    solver's arrays shrink by the points outside every window (a third of a sweep by default).

    Returns the compacted (vgs, id, mask) and the column each entry came from (for :func:`_spread`).
    """
    width = max(int(mask.sum(axis=1).max()), 1)
    if width == mask.shape[1]:
        return vgs, i_d, mask, None
    # window points first, each row's order kept (a window is a run of currents, so neighbours stay neighbours)
    columns = np.argsort(mask <= 0, axis=1, kind="stable")[:, :width]
    return (*(np.take_along_axis(a, columns, axis=1) for a in (vgs, i_d, mask)), columns)


def _spread(values, columns, width):
    # inverse of _window_only for per-point values (entries outside the window are 1)
    if columns is None:
        return values
    full = np.ones((values.shape[0], width))
    np.put_along_axis(full, columns, values, axis=1)
    return full


def _aicc(rss: float, n: float, k: int) -> float:
    if n - k - 1 <= 0:
        return math.inf
    if rss <= 0:
        return -math.inf
    return n * math.log(rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)


def _choose(criteria: dict[str, float], theta: float | None) -> tuple[str, str]:
    """The reported model of one sweep, and why.

    ``criteria`` holds each candidate's AICc on shared weights, ``theta`` the THETA of the converged theta-law
    fit on the same points and weights (None where it did not converge or was not fitted).

    ekv (a weak-inversion tail, not nested with the others) needs the AICc: it wins where it beats both square-law
    forms by more than :data:`AICC_MARGIN`. Between the nested pair the THETA law is reported whenever its THETA
    comes out above the bound 0, the square law where it rests on the bound. THETA (mobility degradation, source
    resistance) is present in every real MOSFET, so this is the bounded fit of the THETA law, reported as the
    square law (the same curve with one parameter fewer) where the bound holds it. Choosing the square law
    because THETA "is not significant" and quoting its errors as if no choice had been made reports the threshold
    conditional on a THETA known to be wrong: on THETA-law parts whose bend stood one to three standard errors
    above the noise the AICc picked it for 40 % of a simulated bag, 1.2 mV off, and the quoted interval held the true
    threshold in about 5 % of those (intervals built as if the selected model had been given beforehand cover too
    rarely, whether it was selected by AIC or by a test: Leeb & Poetscher, "Model selection and inference: facts
    and fiction", Econometric Theory 21 (2005), pages 21-59 from memory; Kabaila & Giri, arXiv:0711.0993).
    The bounded rule keeps the nominal coverage (derived, linearised fit, threshold and THETA estimates jointly
    normal): where the true THETA is 0 the estimate lands on either side of 0 equally often, the THETA law's
    interval covers at its nominal rate on its side by symmetry, and the square law's threshold is the THETA
    law's conditional on THETA = 0, independent of the THETA estimate, so its interval does too; for a true
    THETA of d standard errors the square law is reported only in the Phi(-d) of cases where the estimate fell
    below 0, and the coverage stays within 62-69 % for any d and a threshold-THETA correlation up to 0.95.
    tests/extract/test_coverage.py checks it on ngspice level-3 and level-1 cards.
    """
    finite = {m: c for m, c in criteria.items() if math.isfinite(c)}
    if not finite:
        return "square", "too few points to compare models; square law used"
    pair = [m for m in ("square", "theta") if m in finite]
    if "ekv" in finite and (not pair or all(finite["ekv"] < finite[m] - AICC_MARGIN for m in pair)):
        chosen, why = "ekv", f"lowest AICc, by more than {AICC_MARGIN:g} below both square-law forms"
    elif "theta" in finite and theta is not None and theta > 0.0:
        chosen, why = "theta", f"THETA = {theta:.3g} 1/V, above its bound 0 (the square law would hold it at 0)"
    elif "square" in finite:
        chosen = "square"
        why = ("too few points for the THETA law" if "theta" not in finite
               else "THETA rests at its bound 0 (the curve does not bend down)")
    else:
        chosen, why = min(finite, key=finite.get), "lowest AICc"
    others = ", ".join(f"{m} {finite[m] - finite[chosen]:+.4g}" for m in AUTO_CANDIDATES
                       if m in finite and m != chosen)
    return chosen, f"{chosen}: {why} (AICc relative to it: {others})"


def _rank(points: list[_Points], masks: list[np.ndarray], criteria: list[dict], thetas: list, ut: float, *,
          ekv_from_theta: bool) -> dict[str, tuple]:
    """Fit every candidate on the given windows, fill each sweep's AICc in ``criteria`` and the THETA of its
    converged theta-law fit on those weights in ``thetas`` (None where there is none).

    Returns ``{model: (fit, {sweep index: row})}`` for the sweeps each candidate could be fitted to.
    """
    fits: dict[str, tuple] = {}
    sizes = [int(m.sum()) for m in masks]
    every = None  # all sweeps stacked once, for the candidates every sweep has enough points for
    for candidate in AUTO_CANDIDATES:
        usable = [b for b, size in enumerate(sizes) if size >= len(PARAM_NAMES[candidate]) + 2]
        if not usable:
            continue
        stacked = None
        if len(usable) == len(points):
            every = every or _stacked_window(points, masks)
            stacked = every
        start = None
        if candidate == "ekv" and ekv_from_theta and "theta" in fits:
            # on the top decades the theta candidate already fitted these points: ekv starts from it (its own
            # start would fit a theta law again), n from the steepest log-current slope
            fit_t, row_t = fits["theta"]
            if all(b in row_t for b in usable):
                window = (stacked or _stacked_window([points[b] for b in usable], [masks[b] for b in usable]))[1]
                start = ekv_start_from_theta(window[0], window[1], window[2],
                                             np.array([fit_t.params[row_t[b]] for b in usable]), ut)
        fit, _, _ = _fit_model(candidate, [points[b] for b in usable], [masks[b] for b in usable], start, ut=ut,
                               stacked=stacked)
        for row, b in enumerate(usable):
            criteria[b][candidate] = _aicc(float(fit.rss[row]), float(fit.n_points[row]), len(PARAM_NAMES[candidate]))
        fits[candidate] = (fit, {b: row for row, b in enumerate(usable)})
    if "theta" in fits:  # replaced below by the weighted fit's where there is one
        _store_theta(thetas, *fits["theta"])
    _rank_on_common_weights(points, masks, criteria, thetas, fits, ut)
    return fits


def _store_theta(thetas: list, fit, row_of: dict) -> None:
    # the THETA of each converged theta-law fit (its third parameter), None where the solver did not converge
    for b, row in row_of.items():
        thetas[b] = float(fit.params[row, 2]) if fit.converged[row] else None


def _stated_sigma_v(points: list[_Points]):
    # the VGS noise a record states (its repeated readings' spread), None when no sweep states one
    stated = np.array([np.nan if p.sweep.sigma_v is None else p.sweep.sigma_v for p in points])
    return stated if np.isfinite(stated).any() else None


def _rank_on_common_weights(points: list[_Points], masks: list[np.ndarray], criteria: list[dict], thetas: list,
                            fits: dict, ut: float) -> None:
    """Replace each sweep's criteria by the known-variance AICc on point weights every candidate shares.

    The unweighted comparison lets the noisiest points (low currents, where a little VGS noise is a large relative
    current error) decide, and each model's own variance estimate would absorb its misfit. So the noise of each
    point is estimated once, from the global model (effective variance, extract/eiv.py): theta for the nested
    square/theta pair, ekv where the unweighted comparison found it best,
    every candidate is re-fitted with those weights, and ranked by chi^2 + 2k + 2k(k+1)/(n-k-1): the AICc with
    the variance taken from the global model (Burnham and Anderson, Model Selection and Multimodel Inference,
    2nd ed. 2002, sections 2.4-2.5; from memory).
    """
    if len(fits) < 2:
        return
    richest = {}  # the noise source of each sweep (the global model)
    for b in range(len(points)):
        ranked = {m: c for m, c in criteria[b].items() if math.isfinite(c)}
        if len(ranked) < 2:
            continue
        best = min(ranked, key=ranked.get)
        # square is theta with THETA = 0: theta is the global model of that nested pair; ekv (not nested with
        # them) is the noise source only where it fits best
        richest[b] = "theta" if best != "ekv" and "theta" in ranked else best
    sigma: dict[int, np.ndarray] = {}
    for name in AUTO_CANDIDATES:
        rows = [b for b, r in richest.items() if r == name]
        if not rows:
            continue
        fit, row_of = fits[name]
        chosen = [points[b] for b in rows]
        (vgs, _, _, _), (v, i, m, columns) = _stacked_window(chosen, [masks[b] for b in rows])
        # only the residuals and THETA of this fit are read (not its covariance)
        weighted, s = effective_variance_fit(name, v, i, m, np.array([fit.params[row_of[b]] for b in rows]), ut=ut,
                                             sigma_v=_stated_sigma_v(chosen), with_covariance=False)
        full = _spread(s, columns, vgs.shape[1])
        for k, b in enumerate(rows):
            sigma[b] = full[k, :points[b].vgs.size]
        # the global model's own weighted fit is the last pass of that fit (same weights): no second solve
        _store_aicc(criteria, rows, name, weighted)
        if name == "theta":
            _store_theta(thetas, weighted, dict(zip(rows, range(len(rows)))))
    for name, (fit, row_of) in fits.items():
        rows = [b for b in row_of if b in sigma and richest[b] != name]
        if not rows:
            continue
        chosen = [points[b] for b in rows]
        (_, _, mask, _), (v, i, m, columns) = _stacked_window(chosen, [masks[b] for b in rows])
        weights = np.ones(mask.shape)
        for k, b in enumerate(rows):
            weights[k, :sigma[b].size] = sigma[b]
        if columns is not None:
            weights = np.take_along_axis(weights, columns, axis=1)
        weighted = fit_stacked(name, v, i, m, np.array([fit.params[row_of[b]] for b in rows]), ut=ut,
                               sigma=np.where(m > 0, weights, 1.0), with_covariance=False)
        _store_aicc(criteria, rows, name, weighted)
        if name == "theta":
            _store_theta(thetas, weighted, dict(zip(rows, range(len(rows)))))


def _store_aicc(criteria: list[dict], rows: list[int], name: str, weighted) -> None:
    # AICc with a known variance: chi^2 + 2k + 2k(k+1)/(n-k-1)
    k_params = len(PARAM_NAMES[name])
    for row, b in enumerate(rows):
        n = float(weighted.n_points[row])
        chi2 = float(weighted.rss[row])
        ok = math.isfinite(chi2) and n - k_params - 1 > 0
        criteria[b][name] = chi2 + 2 * k_params + 2 * k_params * (k_params + 1) / (n - k_params - 1) if ok else math.inf


def _decades(i_d: np.ndarray) -> float:
    return float(math.log10(i_d.max() / i_d.min())) if i_d.size > 1 and i_d.min() > 0 else 0.0


def _rank_whole_curves(points, ranked, final_model, reasons, criteria, fits, ut) -> None:
    """Where the full-curve model wins on the top decades and the sweep spans the range it needs, rank again on
    the whole curve and report the winner there (in place).

    A curve that ekv explains better even on the top two decades bends into weak inversion; fitted on those
    decades alone its slope factor is not determined (``MIN_DECADES``), on the whole curve it is. The laws
    without a weak-inversion tail are ranked on the same points, so ranking and reporting still share their data.
    """
    wider = [b for b in range(len(points)) if final_model[b] == "ekv" and not ranked[b][0].all()
             and _decades(points[b].id) >= MIN_DECADES["ekv"]]
    if not wider:
        return
    whole = [np.ones(points[b].id.size, dtype=bool) for b in wider]
    again: list[dict] = [{} for _ in wider]
    thetas: list = [None] * len(wider)
    # each candidate from its own start: a theta law fitted to a weak-inversion tail is no start for ekv
    _rank([points[b] for b in wider], whole, again, thetas, ut, ekv_from_theta=False)
    for k, b in enumerate(wider):
        final_model[b], why = _choose(again[k], thetas[k])
        reasons[b] = (f"{why}, on the whole curve ({_decades(points[b].id):.1f} decades); on the top two decades "
                      f"too: {reasons[b].split(': ', 1)[-1]}")
        ranked[b] = (whole[k], "default")
        criteria[b] = again[k]
        for _, rows in fits.values():
            rows.pop(b, None)  # its comparison fit was on the other window: the reported fit starts afresh


def _stacked_window(points: list[_Points], masks: list[np.ndarray]):
    # the stacked sweeps (see _stack) and their fit windows (see _window_only)
    stacked = _stack(points, masks)
    return stacked, _window_only(*stacked[:3])


def _fit_model(model: str, points: list[_Points], masks: list[np.ndarray], start=None,
               ut: float = thermal_voltage(), weighted: bool = False, stacked=None):
    # stacked: these points and masks as _stacked_window gives them, when the caller has them already
    (vgs, i_d, mask, valid), window = stacked or _stacked_window(points, masks)
    need = len(PARAM_NAMES[model]) + 1
    for p, m in zip(points, masks):
        if m.sum() < need:
            where = f"{p.sweep.source}: " if p.sweep.source else ""
            raise FitError(f"{where}only {int(m.sum())} of the {p.id.size} points (measured {p.id.min():.3g} to "
                           f"{p.id.max():.3g} A) lie in the fit window; the {model} model needs at least {need}")
    # the covariance of this fit is never read: the comparison ranks by the residuals, and the reported
    # fit is the weighted one below
    fit = fit_stacked(model, *window[:3], start, ut=ut, with_covariance=False)
    if not weighted:
        return fit, (vgs, i_d, mask, valid), None
    # the reported fit: effective-variance weights for noise on both axes (see extract/eiv.py)
    fit, sigma = effective_variance_fit(model, *window[:3], fit.params, ut=ut, sigma_v=_stated_sigma_v(points))
    return fit, (vgs, i_d, mask, valid), _spread(sigma, window[3], vgs.shape[1])


def fit_batch(sweeps, model: str = "auto", *, at_current: float | None = None,
              cc_current: float = DEFAULT_CC_CURRENT, window=None, bootstrap: int = 0,
              seed: int = 0, temperature_k: float = T_NOMINAL_K) -> list[FitResult]:
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
    temperature_k : float
        Temperature of the part during the sweep (K): sets UT for the ekv model (so n means
        the same at any bench temperature) and is stored in the fitted ``DeviceParams``.

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
    if not (math.isfinite(temperature_k) and 150.0 <= temperature_k <= 600.0):
        raise InputError(f"temperature {temperature_k} K is not a bench temperature (150-600 K)")
    ut = thermal_voltage(temperature_k)
    points = _fit_points([_as_sweep(item) for item in sweeps])
    if not points:
        return []
    final_model = [model] * len(points)
    reasons = ["requested"] * len(points)
    criteria: list[dict] = [{} for _ in points]
    fits: dict[str, tuple] = {}
    if model == "auto":
        ranked = [_window("square", p.id, window, at_current) for p in points]
        thetas: list = [None] * len(points)
        fits = _rank(points, [m for m, _ in ranked], criteria, thetas, ut, ekv_from_theta=True)
        for b in range(len(points)):
            final_model[b], reasons[b] = _choose(criteria[b], thetas[b])
        if window is None:
            _rank_whole_curves(points, ranked, final_model, reasons, criteria, fits, ut)
    results: list[FitResult | None] = [None] * len(points)
    for name in MODEL_NAMES:
        members = [b for b, m in enumerate(final_model) if m == name]
        # a sweep with too few points for the comparison fit has no row there: it is fitted in a group of its own
        # kind, from the model's own start (the others start from their comparison fit, as alone)
        compared = fits[name][1] if name in fits else {}
        kinds = [[b for b in members if b in compared], [b for b in members if b not in compared]]
        # cache-sized groups: the batched arrays of a few hundred kB are about twice as fast
        for group in (kind[first:first + CHUNK_ROWS] for kind in kinds for first in range(0, len(kind), CHUNK_ROWS)):
            # automatic choice: the winner is reported on the window the models were ranked on
            masks = ([ranked[b] for b in group] if model == "auto"
                     else [_window(name, points[b].id, window, at_current) for b in group])
            start = None
            if name in fits and group[0] in compared:
                # reuse the comparison fit as the start (it is the answer when the window is the same)
                fit_c, row_of = fits[name]
                start = np.array([fit_c.params[row_of[b]] for b in group])
            fit, stacked, sigma = _fit_model(name, [points[b] for b in group], [m for m, _ in masks], start, ut=ut,
                                             weighted=True)
            done = assemble(name, [points[b].sweep for b in group], fit, stacked, [how for _, how in masks],
                            sigma=sigma,
                            at_current=at_current, cc_current=cc_current, reasons=[reasons[b] for b in group],
                            criteria=[criteria[b] for b in group], bootstrap=bootstrap, seed=seed,
                            temperature_k=temperature_k, directions=[(points[b].up, points[b].down) for b in group])
            for b, result in zip(group, done):
                results[b] = result
    return results


def fit_sweep(vgs, id=None, *, model: str = "auto", at_current: float | None = None,  # noqa: A002 (trade name)
              cc_current: float = DEFAULT_CC_CURRENT, window=None, bootstrap: int = 0,
              direction=None, source: str | None = None, seed: int = 0,
              temperature_k: float = T_NOMINAL_K) -> FitResult:
    """Fit one sweep of a diode-connected part.

    Parameters
    ----------
    vgs : array_like or Sweep
        Gate-source voltages (V), or a validated :class:`Sweep` (then ``id`` is omitted).
    id : array_like
        Drain currents (A > 0).
    model, at_current, cc_current, window, bootstrap, seed, temperature_k
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
                     bootstrap=bootstrap, seed=seed, temperature_k=temperature_k)[0]
