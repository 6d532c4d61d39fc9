"""A part's drain current at two temperatures with its zero-temperature-coefficient point marked.

One function the report (or anything else) can call: :func:`plot_id_two_temperatures` draws into a given
matplotlib axes from the plain data of :func:`benchlab.design.part_thermal.id_at_two_temperatures`.
"""

from __future__ import annotations

from typing import Any, Mapping


def plot_id_two_temperatures(ax: Any, data: Mapping[str, Any], label: str = "") -> Any:
    """Draw ID against VGS at the two temperatures of ``data`` and mark the ZTC point; returns ``ax``.

    Below the marked point the hotter curve carries more current (a part there is thermally unstable at a
    fixed gate voltage: Spirito et al., MIEL 2002); above it, less.
    """
    t_low, t_high = data["t_low_k"] - 273.15, data["t_high_k"] - 273.15
    ax.plot(data["vgs"], data["id_low"], color="tab:blue", label=f"{t_low:.0f} degC")
    ax.plot(data["vgs"], data["id_high"], color="tab:red", label=f"{t_high:.0f} degC")
    if data.get("ztc_vgs") is not None:
        ax.plot([data["ztc_vgs"]], [data["ztc_id"]], marker="o", color="black", linestyle="none",
                label=f"ZTC {data['ztc_vgs']:.2f} V")
        ax.axvline(data["ztc_vgs"], color="black", linewidth=0.6, linestyle=":")
    ax.set_xlabel("VGS (V)")
    ax.set_ylabel("ID (A)")
    sources = data.get("sources", {})
    ax.set_title(f"{label} ID at two temperatures (tempco: {sources.get('vth_tempco', '?')})".strip(), fontsize=8)
    ax.legend(fontsize=7)
    return ax
