"""The report's figures, drawn with matplotlib's Agg renderer (no display, no pyplot global state)."""

from __future__ import annotations

import io
from pathlib import Path
from typing import Sequence

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from benchlab.library import PartRecord
from benchlab.models import DeviceParams, solve_resistor_line
from benchlab.report.data import SweepTrace
from benchlab.report.part_figures import DPI, plain_text
from benchlab.report.part_figures import new_figure as _new_figure

SET_MARKERS = ("*", "D", "s", "^", "v", "P", "X", "h")


def save(fig: Figure, path: Path) -> Path:
    """Write the figure as PNG."""
    plain_text(fig)
    fig.savefig(path, format="png", dpi=DPI, bbox_inches="tight")
    return path


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG bytes (for embedding in the HTML page)."""
    buffer = io.BytesIO()
    plain_text(fig)
    fig.savefig(buffer, format="png", dpi=DPI, bbox_inches="tight")
    return buffer.getvalue()


def sweeps_figure(traces: Sequence[SweepTrace], title: str, chosen: Sequence[str] = ()) -> Figure:
    """Every sweep, drain current on a log axis against VGS: the good parts in grey with the chosen set in colour
    (left), the duds on axes of their own (right) so an open or leaky part does not stretch the others' axes."""
    chosen = list(chosen)
    duds = [t for t in traces if t.rejected]
    fig = _new_figure(9.5 if duds else 7.0, 4.6)
    ax = fig.add_subplot(1, 2, 1) if duds else fig.add_subplot()
    good = [t for t in traces if not t.rejected]
    picked = {t.label: t for t in good if t.label in chosen}
    for trace in good:
        if trace.label not in picked:
            ax.semilogy(trace.vgs, trace.id, "-", lw=0.7, color="#b8c2cc")
    if good and len(picked) < len(good):
        ax.plot([], [], "-", color="#b8c2cc", label=f"{len(good) - len(picked)} other good part(s)")
    for label, colour in zip([c for c in chosen if c in picked], _colours(len(picked))):
        trace = picked[label]
        ax.semilogy(trace.vgs, trace.id, ".-", ms=3, lw=1.2, color=colour,
                    label=label + (" (reference)" if label == chosen[0] else ""))
    if not good:
        ax.text(0.5, 0.5, "no good sweeps in this lot", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel("VGS = VDS (V)")
    ax.set_ylabel("ID (A)")
    ax.set_title(title)
    ax.grid(True, which="both", alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, ncol=2 if len(picked) > 6 else 1)
    if duds:
        dud_ax = fig.add_subplot(1, 2, 2)
        for trace, colour in zip(duds, _colours(len(duds))):
            dud_ax.semilogy(trace.vgs, trace.id, "--", lw=1, color=colour, label=trace.label)
        dud_ax.set_xlabel("VGS = VDS (V)")
        dud_ax.set_ylabel("ID (A)")
        dud_ax.set_title(f"Set aside: {len(duds)} dud(s)")
        dud_ax.grid(True, which="both", alpha=0.3)
        dud_ax.legend(fontsize=7)
    return fig


def histograms_figure(parts: Sequence[PartRecord], chosen: Sequence[str] = ()) -> Figure:
    """Histograms of the threshold voltage and of KP (parts with a square / theta / EKV curve), the chosen parts
    marked as ticks under each histogram."""
    fig = _new_figure(9.0, 3.8)
    ax_vth, ax_kp = fig.add_subplot(1, 2, 1), fig.add_subplot(1, 2, 2)
    vth = [p.params.vth for p in parts if p.params is not None]
    kp = [p.params.kp for p in parts if p.params is not None and p.params.model != "linear"]
    for ax, values, label in ((ax_vth, vth, "threshold Vth (V)"), (ax_kp, kp, "KP (A/V^2)")):
        if values:
            ax.hist(values, bins=max(5, min(20, len(values) // 2)), color="#3b6ea5", edgecolor="white")
            ax.axvline(float(np.median(values)), color="#c0392b", lw=1, label=f"median {np.median(values):.4g}")
            picked = [p for p in parts if p.label in chosen and p.params is not None
                      and (ax is ax_vth or p.params.model != "linear")]
            if picked:
                marks = [p.params.vth if ax is ax_vth else p.params.kp for p in picked]
                ax.plot(marks, [0] * len(marks), "|", ms=14, mew=2, color="#e67e22", clip_on=False,
                        label=f"chosen set ({len(marks)})")
            ax.legend(fontsize=8)
        else:
            ax.text(0.5, 0.5, "no values", ha="center", va="center", transform=ax.transAxes)
        ax.set_xlabel(label)
        ax.set_ylabel("parts")
        ax.yaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_title(f"{label.split(' (')[0]}: {len(values)} part(s)")
    return fig


def scatter_figure(parts: Sequence[PartRecord], sets: Sequence[Sequence[str]]) -> Figure:
    """KP against threshold for every fitted part, the chosen sets marked (reference first in each set)."""
    fig = _new_figure()
    ax = fig.add_subplot()
    fitted = {p.label: p for p in parts if p.params is not None and p.params.model != "linear"}
    if fitted:
        ax.scatter([p.params.vth for p in fitted.values()], [p.params.kp for p in fitted.values()],
                   s=18, color="#7f8c8d", label="in the lot")
    for n, members in enumerate(sets):
        chosen = [fitted[label] for label in members if label in fitted]
        if not chosen:
            continue
        marker = SET_MARKERS[n % len(SET_MARKERS)]
        ax.scatter([p.params.vth for p in chosen], [p.params.kp for p in chosen], s=90, marker=marker,
                   facecolors="none", edgecolors=f"C{n % 10}", linewidths=1.5,
                   label=f"set {n + 1}: " + ", ".join(p.label for p in chosen))
        ref = chosen[0]
        ax.annotate(ref.label + " (ref)", (ref.params.vth, ref.params.kp), fontsize=7,
                    xytext=(5, 5), textcoords="offset points")
    if not fitted:
        ax.text(0.5, 0.5, "no parts with a KP curve", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel("threshold Vth (V)")
    ax.set_ylabel("KP (A/V^2)")
    ax.set_title("KP against threshold")
    ax.grid(True, alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7)
    return fig


def operating_point_figure(params: DeviceParams, label: str, supply_v: float, resistor_ohm: float,
                           vgs_op: float | None = None, id_op: float | None = None,
                           source_resistor_ohm: float = 0.0) -> Figure:
    """The reference part's curve, the resistor line from the supply, and where they cross.

    With a source resistor Rs the line in VGS coordinates is ID = (Vs - VGS) / (R + Rs).

    The crossing is solved here again (``solve_resistor_line``) and drawn next to the design's recorded
    operating point, so a stale or inconsistent design shows up as two separate marks.
    """
    fig = _new_figure()
    ax = fig.add_subplot()
    vgs_solved, id_solved = solve_resistor_line(params, supply_v, resistor_ohm, source_resistor_ohm)
    v_max = min(supply_v, max(vgs_solved * 1.5, params.vth + 1.0))
    v = np.linspace(max(0.0, params.vth - 0.5), v_max, 400)
    i_part = params.current(v)
    i_line = (supply_v - v) / (resistor_ohm + source_resistor_ohm)
    ax.plot(v, i_part * 1e3, color="#2c3e50", label=f"{label} ({params.model} curve)")
    ax.plot(v, i_line * 1e3, color="#d35400", label=f"resistor line: {supply_v:g} V through {resistor_ohm:.4g} ohm"
            + (f" + {source_resistor_ohm:.4g} ohm in the source" if source_resistor_ohm else ""))
    ax.plot([vgs_solved], [id_solved * 1e3], "o", ms=8, mfc="none", mec="#27ae60", mew=2,
            label=f"solved: VGS {vgs_solved:.4f} V, ID {id_solved * 1e3:.4g} mA")
    if vgs_op is not None and id_op is not None:
        ax.plot([vgs_op], [id_op * 1e3], "x", ms=9, color="#c0392b",
                label=f"design: VGS {vgs_op:.4f} V, ID {id_op * 1e3:.4g} mA")
    top = max(id_solved * 2.5, (id_op or 0) * 2.5) * 1e3
    ax.set_ylim(0, top if top > 0 else None)
    ax.set_xlabel("VGS (V)")
    ax.set_ylabel("ID (mA)")
    ax.set_title("Operating point of the reference part")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="upper left")
    return fig


def _colours(count: int) -> list:
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(x) for x in np.linspace(0.0, 0.9, max(count, 1))][:count]
