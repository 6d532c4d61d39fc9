"""The result of fitting one sweep: a frozen dataclass that reduces to plain JSON."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Any

from benchlab.models import DeviceParams

# Bump when a change to the fitter can change its numbers; stored with every fit so a
# saved result can be told apart from a re-run with a newer fitter.
FITTER_VERSION = "1.4"

# Flag codes (stable strings, also in docs/extraction.md)
FLAG_FEW_POINTS = "few_points_above_threshold"
FLAG_NARROW_RANGE = "current_range_too_narrow"
FLAG_POOR_FIT = "poor_fit"
FLAG_NON_MONOTONIC = "non_monotonic"
FLAG_HYSTERESIS = "self_heating_hysteresis"
FLAG_POWER_DRIFT = "self_heating_drift"
FLAG_AT_BOUND = "parameter_at_bound"
FLAG_NOT_CONVERGED = "not_converged"
FLAG_CC_OUTSIDE = "cc_current_outside_data"
FLAG_AT_CURRENT_OUTSIDE = "at_current_outside_data"
FLAG_UNCERTAIN = "parameters_poorly_determined"

ALL_FLAGS = (FLAG_FEW_POINTS, FLAG_NARROW_RANGE, FLAG_POOR_FIT, FLAG_NON_MONOTONIC, FLAG_HYSTERESIS,
             FLAG_POWER_DRIFT, FLAG_AT_BOUND, FLAG_NOT_CONVERGED, FLAG_CC_OUTSIDE, FLAG_AT_CURRENT_OUTSIDE,
             FLAG_UNCERTAIN)

# DeviceParams fields that are not parameters of a model (kept 0 in the dataclass, null in plain data)
_NOT_IN_MODEL = {"linear": ("kp", "theta", "n"), "square": ("gm", "theta", "n"), "theta": ("gm", "n"),
                 "ekv": ("gm",)}

STDERR_KEYS = ("vth", "kp", "theta", "n", "gm", "vth_cc", "vgs_at_current", "vth_sd")


def _clean(value):
    # plain JSON has no NaN/inf: an undefined number is null
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


@dataclass(frozen=True)
class FitResult:
    """One sweep's fit, its thresholds and how far to trust them.

    Attributes
    ----------
    model : str
        The model fitted (``linear``, ``square``, ``theta`` or ``ekv``).
    params : DeviceParams
        The fitted curve, usable by the library and the designer as is.
    vth, kp, theta, n : float
        The fitted model's threshold (V), KP (A/V^2; 0 for ``linear``), THETA (1/V; 0 when
        the model has none) and slope factor n (``ekv`` only, else 0).
    slope_mv_per_decade : float or None
        Subthreshold swing n UT ln 10 (mV/decade) for ``ekv``.
    gm : float or None
        Transconductance (A/V) at ``at_current`` from the fitted model; None without one.
    at_current : float or None
        The operating current asked for (A).
    vgs_at_current : float or None
        VGS (V) at ``at_current`` from the fitted model.
    vth_cc : float or None
        VGS at ``cc_current`` interpolated in the data (never extrapolated).
    cc_current : float
        The constant-current criterion (A), default 250 uA.
    rms_residual : float
        RMS of (model - measured) over the fitted points (A).
    rms_relative : float
        RMS of the relative residuals.
    vgs_at_cc, gm_at_cc : float or None
        VGS (V) and gm (A/V) of the fitted curve at ``cc_current`` (250 uA by default), for every
        model (stored and shown beside the data's ``vth_cc``); None only when not finite.
    stderr : dict
        Standard errors of ``vth``, ``kp``, ``theta``, ``n``, ``gm``, ``vth_cc``,
        ``vgs_at_current`` and ``vth_sd`` (the second-derivative threshold), None where not
        applicable; and ``corr_<a>_<b>``, the correlation coefficient of two fitted parameters.
    stderr_method : str
        ``covariance`` (linearised, from the fit) or ``bootstrap/N``.
    flags : tuple of str
        Warnings, codes from :data:`ALL_FLAGS`; ``notes`` explains each in words.
    notes : tuple of str
    thresholds : dict
        Threshold (V) by method: ``model``, ``constant_current``,
        ``extrapolation_sqrt_max_slope``, ``second_derivative_sqrt`` (None when a method
        does not apply to the data).
    window : dict
        The fitted points: ``i_min``, ``i_max`` (A), ``vgs_min``, ``vgs_max`` (V), ``points``,
        ``chosen_by`` (``default`` or ``user``).
    reason : str
        Why this model (the information-criterion comparison for ``auto``).
    criteria : dict
        AICc of each candidate model on the comparison window (``auto`` only).
    points_used, points_skipped : int
        Points fitted, and points of the file left out (status not ``ok``, not conducting).
    hysteresis_v : float or None
        Mean VGS(down) - VGS(up) at equal current (V) when both directions were measured.
    fitter_version : str
    """

    model: str
    params: DeviceParams
    vth: float
    kp: float
    theta: float
    n: float
    slope_mv_per_decade: float | None
    gm: float | None
    at_current: float | None
    vgs_at_current: float | None
    vth_cc: float | None
    cc_current: float
    rms_residual: float
    rms_relative: float
    vgs_at_cc: float | None = None
    gm_at_cc: float | None = None
    stderr: dict = field(default_factory=dict)
    stderr_method: str = "covariance"
    flags: tuple = ()
    notes: tuple = ()
    thresholds: dict = field(default_factory=dict)
    window: dict = field(default_factory=dict)
    reason: str = ""
    criteria: dict = field(default_factory=dict)
    points_used: int = 0
    points_skipped: int = 0
    hysteresis_v: float | None = None
    fitter_version: str = FITTER_VERSION

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict (NaN/inf become None, tuples become lists)."""
        data = {}
        finite = math.isfinite
        for name in _FIELD_NAMES:
            value = getattr(self, name)
            kind = type(value)
            if kind is float:
                data[name] = value if finite(value) else None
            elif kind is dict:  # as _clean, written out (it runs for every number of every result)
                data[name] = {k: None if isinstance(v, float) and not finite(v) else v for k, v in value.items()}
            elif kind is tuple:
                data[name] = list(value)
            elif kind is DeviceParams:
                # a parameter the model does not have is null, never a placeholder 0 (gm of an ekv fit
                # is not 0 A/V: it is in gm / gm_at_cc)
                absent = _NOT_IN_MODEL.get(value.model, ())
                data[name] = {k: (None if k in absent else v) for k, v in value.to_dict().items()}
            else:
                data[name] = _clean(value)
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "FitResult":
        """Inverse of :meth:`to_dict` (unknown keys are ignored)."""
        known = {f.name for f in fields(cls)}
        values = {k: v for k, v in data.items() if k in known}
        values["params"] = DeviceParams.from_dict({k: v for k, v in values["params"].items() if v is not None})
        for name in ("flags", "notes"):
            values[name] = tuple(values.get(name) or ())
        return cls(**values)

    def summary(self) -> str:
        """One line for humans: model, Vth, KP/gm, VGS at the constant current, flags."""
        parts = [f"{self.model}", f"Vth={self.vth:.4f} V"]
        if self.model == "linear":
            parts.append(f"gm={self.params.gm:.4g} A/V")
        else:
            parts.append(f"KP={self.kp:.4g} A/V^2")
        if self.theta:
            parts.append(f"THETA={self.theta:.3g} 1/V")
        if self.model == "ekv":
            parts.append(f"n={self.n:.3f} ({self.slope_mv_per_decade:.1f} mV/dec)")
        cc = f"{self.vth_cc:.4f} V" if self.vth_cc is not None else "outside data"
        parts.append(f"VGS@{self.cc_current * 1e6:g}uA={cc}")
        if self.flags:
            parts.append("flags: " + ", ".join(self.flags))
        return "  ".join(parts)


_FIELD_NAMES = tuple(f.name for f in fields(FitResult))
