"""Temperature behaviour of a part from its fits at several temperatures, and thermal resistance arithmetic.

Pure functions: numbers in, frozen dataclasses out.

Temperature coefficients (:func:`tempco_from_sweeps`): each temperature's sweep is fitted with one model;
dVth/dT is the least-squares slope of Vth against T, the mobility exponent m the slope of -ln KP against
ln T (KP ~ T^-m, the SPICE level-1..3 law has m = 1.5: ngspice manual), and the zero-temperature-coefficient
(ZTC) point is where the fitted curves of the coldest and the hottest temperature cross (dID/dT = 0; below it
a hotter part conducts more: Spirito et al., MIEL 2002, doi:10.1109/MIEL.2002.1003144). Standard errors come
from a residual bootstrap of every sweep together with the scatter of the fixture temperature, so the
correlation between a fit's Vth and KP is carried into the ZTC point.

Thermal resistance by the electrical method (JEDEC JESD51-1, "Integrated Circuit Thermal Measurement
Method - Electrical Test Method (Single Semiconductor Device)"): a K-factor (dVGS/dT at a small sense
current), a junction rise dTj = dV / K and Rth = (dTj - dTx) / P, where dTx is how much the reference point
warmed during heating (JEDEC's dictionary entry "thermal impedance, junction-to-reference point":
Z = (TJf - TJi - dTX) / PH, PH = IH VH; jedec.org/standards-documents/dictionary, citing JESD24-3 and JESD24-4).
The voltage at the switching instant is extrapolated from the early cooling readings against the square root
of the time since the switch (:func:`extrapolate_to_switch`). That correction is from memory: the text of
JESD51-1 was not found to check it (see docs/thermal.md).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any, Sequence

import numpy as np

from benchlab.errors import FitError, InputError
from benchlab.extract.fit import fit_batch
from benchlab.extract.sweepdata import Sweep, validate_points
from benchlab.models import DeviceParams, ztc_crossing

DEFAULT_BOOTSTRAP = 100
ZTC_SEARCH_V = 12.0  # ZTC crossings are looked for up to this far above the threshold (V), see models.ztc_crossing


@dataclass(frozen=True)
class TempcoResult:
    """Temperature coefficients of one part (SI units; None where undetermined).

    ``vth_tempco`` (V/K), ``kp_exponent`` (m in KP ~ T^-m), ``ztc_vgs`` (V), ``ztc_id`` (A), each with a
    standard error in ``stderr``. ``ztc_extrapolated`` is True when the crossing lies above the highest
    VGS measured (the fits are extrapolated there). ``temperatures_k`` and ``vth``/``kp`` per temperature
    are the inputs of the slopes.
    """

    vth_tempco: float | None
    kp_exponent: float | None
    ztc_vgs: float | None
    ztc_id: float | None
    stderr: dict
    ztc_extrapolated: bool
    model: str
    temperatures_k: tuple[float, ...]
    vth: tuple[float, ...]
    kp: tuple[float, ...]
    fits: tuple[dict, ...] = ()
    notes: tuple[str, ...] = ()
    bootstrap: int = 0

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict."""
        data = asdict(self)
        for key in ("temperatures_k", "vth", "kp", "fits", "notes"):
            data[key] = list(data[key])
        return data


def _slope(x: np.ndarray, y: np.ndarray) -> float:
    xm = x - x.mean()
    return float(np.dot(xm, y - y.mean()) / np.dot(xm, xm))


def _extract(fits, temps: np.ndarray) -> tuple[float, float | None, tuple[float, float] | None]:
    vth = np.array([f.vth for f in fits])
    kp = np.array([f.kp for f in fits])
    tempco = _slope(temps, vth)
    exponent = -_slope(np.log(temps), np.log(kp)) if np.all(kp > 0) else None
    order = np.argsort(temps)
    crossing = ztc_crossing(fits[order[0]].params, fits[order[-1]].params)
    return tempco, exponent, crossing


def _as_sweep(item) -> Sweep:
    if isinstance(item, Sweep):
        return item
    vgs, i_d = item
    return validate_points(vgs, i_d)


def _resampled(sweep: Sweep, fitted: DeviceParams, rng: np.random.Generator, count: int, window_low: float):
    """``count`` copies of the sweep with the fit's relative residuals drawn again (residual bootstrap)."""
    vgs, i_d = sweep.fit_points()
    order = np.argsort(vgs, kind="stable")  # fit_points sorts by current; the copies are rising sweeps
    vgs, i_d = vgs[order], i_d[order]
    model = np.asarray(fitted.current(vgs), dtype=float)
    inside = (i_d >= window_low) & (model > 0)
    rel = i_d[inside] / model[inside] - 1.0
    copies = []
    for _ in range(count):
        new = i_d.copy()
        new[inside] = model[inside] * (1.0 + rng.choice(rel, size=rel.size, replace=True))
        new = np.maximum(new, 1e-15)
        copies.append(validate_points(vgs, new, np.full(vgs.size, "up")))
    return copies


def tempco_from_sweeps(sweeps: Sequence, temperatures_k: Sequence[float], *, temperature_sigma_k: Sequence[float]
                       | None = None, model: str = "auto", bootstrap: int = DEFAULT_BOOTSTRAP,
                       seed: int = 0) -> TempcoResult:
    """Threshold tempco, mobility exponent and ZTC point of one part swept at two or more temperatures.

    Parameters
    ----------
    sweeps : sequence
        One sweep per temperature: :class:`Sweep` objects or ``(vgs, id)`` pairs (A > 0).
    temperatures_k : sequence of float
        The part's temperature during each sweep (K), at least two distinct values.
    temperature_sigma_k : sequence of float, optional
        Standard uncertainty of each temperature (K), carried into the standard errors.
    model : str
        ``auto`` picks a model on the coldest sweep (AICc) and fits every temperature with it.
    bootstrap : int
        Residual-bootstrap resamples for the standard errors (0: none, errors are None).
    seed : int
        Seed of the resampling (results are reproducible).

    Returns
    -------
    TempcoResult

    Raises
    ------
    InputError
        Fewer than two temperatures, mismatched lengths, a temperature outside 150-600 K.
    FitError
        A sweep that cannot be fitted.
    """
    temps = np.asarray(temperatures_k, dtype=float)
    if len(sweeps) != temps.size or temps.size < 2:
        raise InputError("the temperature coefficients need one sweep per temperature, at least two temperatures")
    if np.ptp(temps) < 1.0:
        raise InputError(f"the temperatures {', '.join(f'{t:.2f}' for t in temps)} K are less than 1 K apart")
    sigma = np.zeros(temps.size) if temperature_sigma_k is None else np.asarray(temperature_sigma_k, dtype=float)
    data = [_as_sweep(s) for s in sweeps]
    order = np.argsort(temps)
    first = fit_batch([data[order[0]]], model, temperature_k=float(temps[order[0]]))[0]
    chosen = first.model
    if chosen == "linear":
        raise FitError("the coldest sweep is fitted best by the linear model, which has no KP: sweep a wider "
                       "current range for the temperature coefficients")
    fits = [first if k == order[0] else fit_batch([data[k]], chosen, temperature_k=float(temps[k]))[0]
            for k in range(temps.size)]
    tempco, exponent, crossing = _extract(fits, temps)
    notes = []
    extrapolated = False
    if crossing is None:
        notes.append(f"no ZTC crossing within {ZTC_SEARCH_V:g} V above threshold: the current rises with "
                     "temperature over the whole range")
    else:
        top = min(float(np.max(d.fit_points()[0])) for d in data)
        extrapolated = crossing[0] > top
        if extrapolated:
            notes.append(f"the ZTC point ({crossing[0]:.2f} V) lies above the highest VGS swept ({top:.2f} V): "
                         "it is extrapolated from the fits")
    stderr: dict[str, float | None] = {"vth_tempco": None, "kp_exponent": None, "ztc_vgs": None, "ztc_id": None}
    if bootstrap >= 2:
        rng = np.random.default_rng(seed)
        replicas = []
        for k, (sweep, fit) in enumerate(zip(data, fits)):
            low = float(fit.window.get("i_min") or 0.0)
            copies = _resampled(sweep, fit.params, rng, bootstrap, low)
            replicas.append(fit_batch(copies, chosen, temperature_k=float(temps[k]),
                                      window=(low * (1 - 1e-9), float(fit.window.get("i_max") or 1.0) * 2.0)
                                      if low > 0 else None))
        draws = {"vth_tempco": [], "kp_exponent": [], "ztc_vgs": [], "ztc_id": []}
        for b in range(bootstrap):
            t_b = temps + rng.normal(0.0, 1.0, temps.size) * sigma
            t_b_fits = [replicas[k][b] for k in range(temps.size)]
            tc, ex, cr = _extract(t_b_fits, t_b)
            draws["vth_tempco"].append(tc)
            if ex is not None:
                draws["kp_exponent"].append(ex)
            if cr is not None:
                draws["ztc_vgs"].append(cr[0])
                draws["ztc_id"].append(cr[1])
        for key, values in draws.items():
            if len(values) >= max(2, bootstrap // 2):
                stderr[key] = float(np.std(values, ddof=1))
    return TempcoResult(
        vth_tempco=float(tempco), kp_exponent=None if exponent is None else float(exponent),
        ztc_vgs=None if crossing is None else crossing[0], ztc_id=None if crossing is None else crossing[1],
        stderr=stderr, ztc_extrapolated=extrapolated, model=chosen, temperatures_k=tuple(float(t) for t in temps),
        vth=tuple(float(f.vth) for f in fits), kp=tuple(float(f.kp) for f in fits),
        fits=tuple(f.params.to_dict() for f in fits), notes=tuple(notes), bootstrap=int(bootstrap))


# ------------------------------------------------------------------------------------------------ thermal resistance
@dataclass(frozen=True)
class Line:
    """A straight-line fit y = intercept + slope x with standard errors."""

    intercept: float
    slope: float
    intercept_stderr: float
    slope_stderr: float


def fit_line(x: Sequence[float], y: Sequence[float]) -> Line:
    """Ordinary least squares with the usual standard errors (residual variance with n - 2 degrees of freedom)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.size < 2 or np.ptp(x) == 0:
        raise InputError("a line needs at least two distinct x values")
    slope = _slope(x, y)
    intercept = float(y.mean() - slope * x.mean())
    if x.size < 3:
        return Line(intercept, slope, 0.0, 0.0)
    resid = y - (intercept + slope * x)
    s2 = float(np.dot(resid, resid) / (x.size - 2))
    sxx = float(np.dot(x - x.mean(), x - x.mean()))
    return Line(intercept, slope, math.sqrt(s2 * (1.0 / x.size + x.mean() ** 2 / sxx)), math.sqrt(s2 / sxx))


def extrapolate_to_switch(times_s: Sequence[float], volts: Sequence[float]) -> Line:
    """Fit V = V0 + b sqrt(t) to the early cooling readings; ``intercept`` is V at the switching instant.

    The junction cools from the moment heating stops, so the first reading already sees part of the fall;
    extrapolating against sqrt(t) (one-dimensional heat flow near the die) recovers the voltage at t = 0.
    Early on, the die cools as the surface of a semi-infinite body whose heat flux is switched off, a fall
    proportional to sqrt(t) (Carslaw & Jaeger, constant flux into a semi-infinite solid, by superposition);
    checked against ngspice's distributed RC line in tests/extract/test_cooling_ngspice.py. JESD51-1's own
    wording of the correction could not be checked (docs/thermal.md).
    """
    t = np.asarray(times_s, dtype=float)
    if np.any(t <= 0):
        raise InputError("cooling readings must be after the switch (t > 0)")
    return fit_line(np.sqrt(t), volts)


@dataclass(frozen=True)
class RthResult:
    """Thermal resistance by the electrical method, with what it was computed from (SI units)."""

    rth: float
    rth_stderr: float
    rth_uncorrected: float
    k_factor: float
    k_factor_stderr: float
    power_w: float
    junction_rise_k: float
    delay_s: float
    sense_current_a: float
    heating_current_a: float
    heating_s: float
    reference_k: float
    heatsink_k_per_w: float = 0.0
    pulsed_dc: dict = field(default_factory=dict)
    reference_rise_k: float = 0.0  # the fixture's warming during heating, subtracted (JEDEC's dTX)
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict."""
        data = asdict(self)
        data["notes"] = list(self.notes)
        return data


def rth_electrical(*, cal_temps_k: Sequence[float], cal_volts: Sequence[float], cal_sigma_v: float,
                   cal_sigma_k: float, cold_v: float, cooling_t_s: Sequence[float], cooling_v: Sequence[float],
                   power_w: float, heatsink_k_per_w: float = 0.0, reference_rise_k: float = 0.0) -> dict[str, float]:
    """Rth from a K-factor calibration and the cooling readings after heating (JESD51-1 electrical method).

    Parameters
    ----------
    cal_temps_k, cal_volts : sequence of float
        Fixture temperatures (K) and VGS at the sense current (V), power negligible.
    cal_sigma_v, cal_sigma_k : float
        Standard uncertainty of one calibration voltage (V) and temperature (K).
    cold_v : float
        VGS at the sense current at the reference temperature just before heating (V).
    cooling_t_s, cooling_v : sequence of float
        Time since the switch to the sense current (s) and VGS read then (V).
    power_w : float
        Heating power at steady state (W).
    heatsink_k_per_w : float
        Heat sink between the part and the reference point during the measurement; subtracted.
    reference_rise_k : float
        How much the reference point (the fixture's sensed temperature) warmed from before heating to the end
        of it; subtracted from the junction rise (dTX of JEDEC's junction-to-reference definition).

    Returns
    -------
    dict
        ``rth``, ``rth_stderr``, ``rth_uncorrected``, ``k_factor``, ``k_factor_stderr``, ``junction_rise_k``,
        ``delay_s`` (first reading's delay).
    """
    if not power_w > 0:
        raise InputError("the heating power must be above 0 W")
    temps = np.asarray(cal_temps_k, dtype=float)
    line = fit_line(temps, cal_volts)
    k = line.slope
    span = float(np.ptp(temps))
    # two-point calibration: both readings' noise and both temperatures' uncertainty enter the slope
    k_err = math.hypot(line.slope_stderr, math.sqrt(2.0) * math.hypot(cal_sigma_v, abs(k) * cal_sigma_k) / span)
    if k >= 0 or not math.isfinite(k):
        raise FitError(f"the K-factor came out {k * 1e3:+.3f} mV/K; VGS at the sense current must fall with "
                       "temperature (check the sensor and the sense current)")
    cooling = extrapolate_to_switch(cooling_t_s, cooling_v)
    rise = (cooling.intercept - cold_v) / k
    rise_first = (float(cooling_v[0]) - cold_v) / k
    rth = (rise - reference_rise_k) / power_w - heatsink_k_per_w
    rise_err = math.hypot(cooling.intercept_stderr, cal_sigma_v) / abs(k)
    rth_err = abs(rise / power_w) * math.hypot(k_err / abs(k), rise_err / abs(rise) if rise else 0.0)
    # the cooling correction rests on an approximation (sqrt(t) heat flow): half of it counts as its uncertainty
    correction = (rise - rise_first) / power_w
    rth_err = math.hypot(rth_err, correction / 2.0)
    return {"rth": rth, "rth_stderr": rth_err,
            "rth_uncorrected": (rise_first - reference_rise_k) / power_w - heatsink_k_per_w,
            "k_factor": k, "k_factor_stderr": k_err, "junction_rise_k": rise, "delay_s": float(cooling_t_s[0])}
