"""Build session folders exactly as docs/session-format.md describes, from known curves (test data)."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Sequence

import numpy as np

from benchlab.models import DeviceParams


def sweep_points(params: DeviceParams, *, count: int = 40, i_min: float = 2e-5, i_max: float = 0.2,
                 noise: float = 0.0, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Points spaced evenly in log current, as the sweep engine aims for; relative meter noise on ID."""
    currents = np.geomspace(i_min, i_max, count)
    vgs = np.asarray(params.vgs_at(currents), dtype=float)
    rng = np.random.default_rng(seed)
    measured = currents * (1.0 + noise * rng.standard_normal(count))
    return vgs, measured


def write_session(root: Path, name: str, lot: str, parts: Sequence[dict]) -> Path:
    """Write ``root/name`` with ``session.json`` and, per part, ``<label>.csv`` and ``<label>.json``.

    Each part dict: ``label``, and either ``params`` (a DeviceParams; points computed from it) or
    ``vgs``/``id`` arrays; optional ``classification`` (default good), ``reason``, ``complete``,
    ``status`` (list), ``store_fit`` (put the true curve in the sidecar's ``fits``), ``noise``.
    """
    folder = Path(root) / name
    folder.mkdir(parents=True)
    labels = []
    for n, part in enumerate(parts):
        label = part["label"]
        labels.append(label)
        if "vgs" in part:
            vgs, ids = np.asarray(part["vgs"], float), np.asarray(part["id"], float)
        else:
            vgs, ids = sweep_points(part["params"], noise=part.get("noise", 0.0), seed=n,
                                    count=part.get("count", 40))
        status = part.get("status") or ["ok"] * len(vgs)
        with (folder / f"{label}.csv").open("w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(["point", "time_s", "vgs", "id", "v_source", "i_source", "status"])
            for k, (v, i, s) in enumerate(zip(vgs, ids, status)):
                writer.writerow([k, f"{0.05 * k:.3f}", repr(float(v)), repr(float(i)), repr(float(v + 100 * i)),
                                 repr(float(i)), s])
        fits = []
        if part.get("store_fit") and part.get("params") is not None:
            fits.append({"model": part["params"].model, "params": part["params"].to_dict(),
                         "stderr": {"vth": 1e-3, "kp": 1e-3}, "flags": [], "fitter_version": "stored"})
        sidecar = {"format": "benchlab-sweep/1", "label": label, "lot": lot, "started": "2026-12-02T10:15:00+00:00",
                   "ended": "2026-12-02T10:15:02+00:00", "complete": part.get("complete", True),
                   "classification": part.get("classification", "good"), "reason": part.get("reason", ""),
                   "powered_s": 1.5, "plan": {"fixture": "resistor", "resistor_ohm": 100.0}, "fits": fits}
        (folder / f"{label}.json").write_text(json.dumps(sidecar), encoding="utf-8")
    meta = {"format": "benchlab-session/1", "id": name, "operator": "test", "started": "2026-12-02T10:15:00+00:00",
            "ended": "2026-12-02T10:20:00+00:00", "lot": lot, "ambient_c": 22.5, "bench": {},
            "instruments": {"supply": "BENCHLAB-SIM,SUPPLY,0,1"}, "parts": labels}
    (folder / "session.json").write_text(json.dumps(meta), encoding="utf-8")
    return folder


def demo_bag(count: int, *, seed: int = 7, duds: Sequence[int] = ()) -> list[dict]:
    """An invented bag (test data only): square/theta-law parts with spread thresholds and KP."""
    rng = np.random.default_rng(seed)
    parts = []
    for k in range(count):
        params = DeviceParams("theta", vth=float(rng.normal(3.0, 0.15)), kp=float(rng.normal(1.2, 0.1)),
                              theta=float(abs(rng.normal(0.08, 0.02))))
        part = {"label": f"Q{k + 1:02d}", "params": params, "store_fit": True}
        if k in duds:
            part.update(classification="open", reason="no current at the top of the sweep", store_fit=False)
        parts.append(part)
    return parts


def fit_points_square(points, temperature_k=None):
    """:func:`curve_fit_square` as the library's import calls a fit function (``f(points, temperature_k)``)."""
    return curve_fit_square(points.vgs, points.id, points.direction, temperature_k)


def curve_fit_square(vgs, i_d, direction=None, temperature_k=None):
    """An independent fitter for tests: scipy's curve_fit on sqrt(ID) = sqrt(KP/2) (VGS - Vth), up-sweep only.

    Returns the plain-dict form the library accepts from a fit function.
    """
    from scipy.optimize import curve_fit

    vgs, i_d = np.asarray(vgs, float), np.asarray(i_d, float)
    if direction is not None:
        up = np.asarray(direction) == "up"
        vgs, i_d = vgs[up], i_d[up]
    popt, pcov = curve_fit(lambda v, vth, kp: np.sqrt(kp / 2.0) * np.maximum(v - vth, 0.0),
                           vgs, np.sqrt(i_d), p0=(float(vgs.min()) - 0.1, 1.0))
    err = np.sqrt(np.diag(pcov))
    return {"params": DeviceParams("square", vth=float(popt[0]), kp=float(popt[1])),
            "stderr": {"vth": float(err[0]), "kp": float(err[1])}, "flags": [], "fitter_version": "test-curve_fit"}


def square_bag_with_dud(good: int, *, vth0: float, vth_step: float, kp0: float, kp_sigma: float,
                        seed: int) -> list[dict]:
    """An invented bag (test data only): ``good`` square-law parts with stepped thresholds and scattered KP, then
    one open dud that never conducts (its sweep runs to 9.5 V)."""
    rng = np.random.default_rng(seed)
    parts = [{"label": f"Q{k:02d}", "params": DeviceParams("square", vth=float(vth0 + vth_step * k),
                                                            kp=float(kp0 + kp_sigma * rng.standard_normal()))}
             for k in range(1, good + 1)]
    parts.append({"label": f"Q{good + 1:02d}", "vgs": [0.5, 3.0, 9.5], "id": [2e-9, 3e-9, 4e-9],
                  "classification": "open", "reason": "no current at the top of the sweep"})
    return parts
