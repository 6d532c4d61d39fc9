"""Parts as the designer sees them, and a vectorised evaluator over many parts at once.

A :class:`Part` is a label plus a fitted curve (:class:`benchlab.models.DeviceParams`) and the
fit's standard errors. :class:`PartArrays` holds the parameters of many parts as numpy arrays
so the matcher and the Monte Carlo can evaluate thousands of curves in one call; it gives the
same numbers as ``DeviceParams.current`` / ``vgs_at`` (checked in the tests).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Sequence

import numpy as np

from benchlab.bounds import check_typed_curve
from benchlab.errors import InputError
from benchlab.models import DeviceParams, thermal_voltage

_MODEL_CODES = {"linear": 0, "square": 1, "theta": 2, "ekv": 3}


@dataclass(frozen=True)
class Part:
    """One part for design work.

    Parameters
    ----------
    label : str
        The part's label (e.g. ``"Q07"``).
    params : DeviceParams
        Its fitted curve.
    stderr : dict
        Standard errors of the fitted parameters, keyed by ``DeviceParams`` field name
        (``vth``, ``kp``, ``theta``, ``gm``, ``n``); missing keys mean "unknown" (taken as 0).
    lot : str
        The lot/bag it belongs to ("" when given inline).
    part_id : int or None
        Its id in the device library, when it came from there.
    thermal : dict
        Its measured thermal values, ``{quantity: {"value", "stderr", "measured_at", ...}}`` as the library
        keeps them (``benchlab.library.thermal.measured_thermal``); empty when never measured.
    """

    label: str
    params: DeviceParams
    stderr: dict = field(default_factory=dict)
    lot: str = ""
    part_id: int | None = None
    thermal: dict = field(default_factory=dict)

    @property
    def name(self) -> str:
        """``LOT/LABEL`` when the lot is known, else the label."""
        return f"{self.lot}/{self.label}" if self.lot else self.label

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return {"label": self.label, "lot": self.lot, "part_id": self.part_id,
                "params": self.params.to_dict(), "stderr": {k: (float(v) if v is not None else None) for k, v in self.stderr.items()}}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Part":
        """Inverse of :meth:`to_dict` (a part as a stored design keeps it); unknown stderr values are dropped."""
        stderr = {k: float(v) for k, v in (data.get("stderr") or {}).items() if isinstance(v, (int, float))}
        return cls(str(data["label"]), DeviceParams.from_dict(data["params"]), stderr=stderr,
                   lot=str(data.get("lot") or ""), part_id=data.get("part_id"))


_INLINE_KEYS = {"vth", "kp", "theta", "n", "gm", "model", "label", "temperature_k"}


def parse_inline_model(text: str, default_label: str) -> Part:
    """Build a part from a short ``key=value`` list, for use without a library.

    Parameters
    ----------
    text : str
        Comma-separated ``key=value`` pairs, e.g. ``"vth=2.95,gm=0.8"`` (linear model; invented values),
        ``"vth=2.1,kp=0.8"`` (square law), ``"vth=2.1,kp=0.8,theta=0.12"`` (theta law),
        ``"vth=2.1,kp=0.8,n=1.4"`` (ekv). ``model=`` forces the model, ``label=`` names the part.
    default_label : str
        Label used when the text has no ``label=``.

    Returns
    -------
    Part
    """
    values: dict[str, Any] = {}
    for chunk in str(text).split(","):
        chunk = chunk.strip()
        if not chunk:
            continue
        key, sep, raw = chunk.partition("=")
        key = key.strip().lower()
        if not sep or key not in _INLINE_KEYS:
            raise InputError(f"inline model '{text}': expected key=value with keys {', '.join(sorted(_INLINE_KEYS))}")
        if key in ("model", "label"):
            values[key] = raw.strip()
            continue
        try:
            values[key] = float(raw)
        except ValueError:
            raise InputError(f"inline model '{text}': {key} needs a number, got '{raw.strip()}'") from None
        if not math.isfinite(values[key]):
            raise InputError(f"inline model '{text}': {key} needs a finite number, got '{raw.strip()}'")
    if "vth" not in values:
        raise InputError(f"inline model '{text}': vth is required")
    label = values.pop("label", default_label)
    model = values.pop("model", None)
    if model is None:
        if "gm" in values:
            model = "linear"
        elif "n" in values:
            model = "ekv"
        elif "theta" in values:
            model = "theta"
        else:
            model = "square"
    try:
        params = DeviceParams(model=model, **values)
    except (TypeError, ValueError) as exc:
        raise InputError(f"inline model '{text}': {exc}") from None
    check_typed_curve(params, f"inline model '{text}'")
    return Part(label=label, params=params)


@dataclass(frozen=True)
class PartArrays:
    """Parameters of many parts as arrays (one entry per part), for vectorised evaluation."""

    code: np.ndarray
    vth: np.ndarray
    kp: np.ndarray
    theta: np.ndarray
    n: np.ndarray
    gm: np.ndarray
    ut: np.ndarray

    @classmethod
    def from_params(cls, params: Sequence[DeviceParams]) -> "PartArrays":
        """Pack a sequence of :class:`DeviceParams` (models may be mixed)."""
        code = np.array([_MODEL_CODES[p.model] for p in params], dtype=int)
        theta = np.array([p.theta if p.model in ("theta", "ekv") else 0.0 for p in params], dtype=float)
        n = np.array([p.n if p.model == "ekv" else 0.0 for p in params], dtype=float)
        return cls(code=code, vth=np.array([p.vth for p in params], dtype=float),
                   kp=np.array([p.kp for p in params], dtype=float), theta=theta, n=n,
                   gm=np.array([p.gm for p in params], dtype=float),
                   ut=np.array([thermal_voltage(p.temperature_k) for p in params], dtype=float))

    def __len__(self) -> int:
        return int(self.vth.shape[0])

    def take(self, index) -> "PartArrays":
        """The parts at ``index`` (any numpy index, may repeat), as a new PartArrays."""
        return PartArrays(*(getattr(self, f)[index] for f in ("code", "vth", "kp", "theta", "n", "gm", "ut")))

    def _shape(self, index):
        if index is None:
            return self
        return self.take(index)

    def current(self, vgs, index=None):
        """Drain current of part ``index[k]`` at ``vgs[k]`` (broadcast), same laws as ``DeviceParams.current``."""
        p = self._shape(index)
        vov = np.asarray(vgs, dtype=float) - p.vth
        hard = np.maximum(vov, 0.0)
        q = hard
        ekv = p.code == 3
        if ekv.any():  # the soft overdrive costs a log and an exp: only when a part needs it
            scale = np.where(ekv, 2.0 * np.maximum(p.n, 1.0) * p.ut, 1.0)
            q = np.where(ekv, scale * np.logaddexp(0.0, vov / scale), hard)
        sat = 0.5 * p.kp * q * q / (1.0 + p.theta * q)
        linear = p.code == 0
        return np.where(linear, p.gm * hard, sat) if linear.any() else sat

    def vgs_at(self, i_d, index=None):
        """VGS at which part ``index[k]`` carries ``i_d[k]`` (> 0), same as ``DeviceParams.vgs_at``."""
        p = self._shape(index)
        i_d = np.asarray(i_d, dtype=float)
        linear = p.code == 0
        any_linear = linear.any()
        safe_kp = np.where(linear, 1.0, p.kp) if any_linear else p.kp
        q = (i_d * p.theta + np.sqrt((i_d * p.theta) ** 2 + 2.0 * safe_kp * i_d)) / safe_kp
        ekv = p.code == 3
        if ekv.any():
            scale = np.where(ekv, 2.0 * np.maximum(p.n, 1.0) * p.ut, 1.0)
            with np.errstate(divide="ignore", invalid="ignore"):
                y = q / scale
                q = np.where(ekv, scale * (y + np.log(-np.expm1(-y))), q)
        sat = p.vth + q
        if not any_linear:
            return sat
        return np.where(linear, p.vth + i_d / np.where(linear, p.gm, 1.0), sat)

    def gm_at(self, i_d, index=None):
        """Transconductance dID/dVGS at current ``i_d`` (by the analytic derivative of each law)."""
        p = self._shape(index)
        i_d = np.asarray(i_d, dtype=float)
        vgs = p.vgs_at(i_d)
        vov = vgs - p.vth
        ekv = p.code == 3
        scale = np.where(ekv, 2.0 * np.maximum(p.n, 1.0) * p.ut, 1.0)
        q = np.where(ekv, scale * np.logaddexp(0.0, vov / scale), np.maximum(vov, 0.0))
        did_dq = 0.5 * p.kp * q * (2.0 + p.theta * q) / (1.0 + p.theta * q) ** 2
        dq = np.where(ekv, 1.0 / (1.0 + np.exp(-vov / scale)), (vov > 0).astype(float))
        return np.where(p.code == 0, np.where(vov > 0, p.gm, 0.0), did_dq * dq)


def parts_to_arrays(parts: Iterable[Part]) -> PartArrays:
    """Pack the curves of ``parts`` into a :class:`PartArrays`."""
    return PartArrays.from_params([p.params for p in parts])

