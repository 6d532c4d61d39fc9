"""Each part's thermal values for the designer: measured where the library has them, else a stated assumption.

A :class:`ThermalValues` per part carries the threshold coefficient, the mobility exponent, the thermal
resistance (the part's own plus the user's heat-sink figure) and the ZTC point, each with its source:
``measured`` (a ``benchlab thermal`` run stored in the library) or the default assumption named in words.
Pure functions on plain data.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from benchlab.models import DeviceParams, ztc_crossing

DEFAULT_VTH_TEMPCO = -5e-3  # V/K, a middle value of power-MOSFET datasheets (-2 to -8 mV/K; from memory)
DEFAULT_KP_EXPONENT = 1.5  # KP ~ T^-1.5, the SPICE level-1 mobility law (ngspice manual)
PACKAGE_RTH_K_PER_W = 62.0  # free-standing TO-220-like package, junction to ambient (from memory)
MEASURED = "measured"


@dataclass(frozen=True)
class ThermalValues:
    """One part's thermal values as the design uses them (SI units) and where each came from."""

    part: str
    vth_tempco: float
    kp_exponent: float
    rth_part: float
    heatsink: float
    ztc_vgs: float | None
    ztc_id: float | None
    sources: dict

    @property
    def rth(self) -> float:
        """Junction-to-ambient thermal resistance used: the part's own plus the heat sink (K/W)."""
        return self.rth_part + self.heatsink

    def at(self, params: DeviceParams, temperature_k: float) -> DeviceParams:
        """The part's curve at another temperature with its own coefficients."""
        return params.with_temperature(temperature_k, self.vth_tempco, -self.kp_exponent)

    def to_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["rth"] = self.rth
        return data


def thermal_values(label: str, params: DeviceParams, measured: Mapping[str, Any] | None, *,
                   vth_tempco: float = DEFAULT_VTH_TEMPCO, vth_tempco_source: str = "",
                   rth: float | None = None, heatsink: float = 0.0) -> ThermalValues:
    """Resolve a part's thermal values.

    Parameters
    ----------
    label : str
        The part's name (for messages).
    params : DeviceParams
        Its fitted curve (for a ZTC point derived from assumed coefficients).
    measured : mapping, optional
        ``{quantity: {"value": ..., ...}}`` as :func:`benchlab.library.thermal.measured_thermal` returns.
    vth_tempco : float
        Coefficient assumed when none was measured (V/K); ``vth_tempco_source`` names where it came from.
    rth : float, optional
        Part thermal resistance assumed when none was measured (default: the 62 K/W package assumption).
    heatsink : float
        Heat sink added to every part's own resistance (K/W).
    """
    measured = measured or {}
    sources: dict[str, str] = {}

    def pick(key: str, default: float, why: str) -> float:
        entry = measured.get(key)
        if entry is not None and entry.get("value") is not None:
            sources[key] = MEASURED + (f" {entry['measured_at']}" if entry.get("measured_at") else "")
            return float(entry["value"])
        sources[key] = why
        return float(default)

    tempco = pick("vth_tempco", vth_tempco, vth_tempco_source or f"default assumption {DEFAULT_VTH_TEMPCO * 1e3:g} mV/K")
    exponent = pick("kp_exponent", DEFAULT_KP_EXPONENT, f"default assumption KP ~ T^-{DEFAULT_KP_EXPONENT:g}")
    rth_part = pick("rth", PACKAGE_RTH_K_PER_W if rth is None else rth,
                    f"default assumption {PACKAGE_RTH_K_PER_W:g} K/W (free-standing TO-220-like package)"
                    if rth is None else "option --thermal-resistance")
    sources["heatsink"] = "option --heatsink" if heatsink else "none"
    if measured.get("ztc_vgs", {}).get("value") is not None and measured.get("ztc_id", {}).get("value") is not None:
        ztc = (float(measured["ztc_vgs"]["value"]), float(measured["ztc_id"]["value"]))
        sources["ztc"] = MEASURED
    else:
        hot = params.with_temperature(params.temperature_k + 10.0, tempco, -exponent)
        ztc = ztc_crossing(params, hot)
        sources["ztc"] = "derived from the fitted curve with the coefficients above"
    return ThermalValues(part=label, vth_tempco=tempco, kp_exponent=exponent, rth_part=rth_part,
                         heatsink=float(heatsink), ztc_vgs=None if ztc is None else ztc[0],
                         ztc_id=None if ztc is None else ztc[1], sources=sources)


def ztc_position(values: ThermalValues, vgs: float) -> str:
    """``below`` / ``above`` the ZTC point at this VGS, or ``no ZTC found``."""
    if values.ztc_vgs is None:
        return "no ZTC found (current rises with temperature everywhere)"
    if vgs < values.ztc_vgs:
        return f"below ZTC ({values.ztc_vgs:.2f} V): a hotter part conducts more"
    return f"above ZTC ({values.ztc_vgs:.2f} V): a hotter part conducts less"


def loop_gain(values: ThermalValues, tc_fixed_vgs: float, i_out: float, v_part: float) -> float:
    """Electro-thermal loop gain of one output at a fixed gate voltage: Rth x V x dI/dT.

    A hotter part changes its current by ``tc_fixed_vgs`` (relative, per K); its dissipation then changes by
    V dI, which heats it by Rth V dI. Above 1 the loop runs away (Spirito et al., MIEL 2002).
    """
    return values.rth * v_part * tc_fixed_vgs * i_out


def id_at_two_temperatures(params: DeviceParams, values: ThermalValues, t_low_k: float, t_high_k: float,
                           vgs: Sequence[float] | None = None) -> dict[str, Any]:
    """Curves of ID against VGS at two temperatures with the ZTC point marked (for the report's figure).

    Returns plain data: ``vgs`` (V), ``id_low``, ``id_high`` (A), the temperatures (K), ``ztc_vgs``,
    ``ztc_id`` and the sources of the coefficients used.
    """
    cold, hot = values.at(params, t_low_k), values.at(params, t_high_k)
    top = max(values.ztc_vgs or 0.0, params.vth + 2.0) + 0.5
    grid = np.linspace(params.vth, top, 120) if vgs is None else np.asarray(vgs, dtype=float)
    crossing = ztc_crossing(cold, hot)
    return {"vgs": grid.tolist(), "id_low": np.asarray(cold.current(grid), dtype=float).tolist(),
            "id_high": np.asarray(hot.current(grid), dtype=float).tolist(), "t_low_k": t_low_k,
            "t_high_k": t_high_k, "ztc_vgs": None if crossing is None else crossing[0],
            "ztc_id": None if crossing is None else crossing[1], "sources": dict(values.sources)}


__all__ = ["DEFAULT_KP_EXPONENT", "DEFAULT_VTH_TEMPCO", "PACKAGE_RTH_K_PER_W", "ThermalValues", "id_at_two_temperatures",
           "loop_gain", "thermal_values", "ztc_position"]
