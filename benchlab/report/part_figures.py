"""Figures of single parts and of a design's outputs (matplotlib, Agg renderer, no pyplot global state).

The same code draws the report's figures, ``benchlab parts show --plot`` and ``benchlab fit --plot``.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Text

from benchlab.models import DeviceParams

DPI = 100
CC_CURRENT_A = 250e-6  # the constant-current threshold criterion (benchlab.extract.fit.DEFAULT_CC_CURRENT)


def plain_text(fig: Figure) -> Figure:
    """Every text of the figure drawn literally: a part label holding ``$`` must not be read as math (matplotlib
    would fail on it, or draw something else). Call it just before saving."""
    ours = set()  # the axes' own tick labels and offsets are matplotlib's (log ticks are drawn as math)
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            ours.add(id(axis.offsetText))
            for tick in axis.get_major_ticks() + axis.get_minor_ticks():
                ours.update((id(tick.label1), id(tick.label2)))
    for text in fig.findobj(Text):
        if id(text) not in ours:
            text.set_parse_math(False)
    return fig


def new_figure(width: float = 7.0, height: float = 4.5) -> Figure:
    """A figure bound to the Agg canvas (works headless, keeps no global state)."""
    fig = Figure(figsize=(width, height), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def part_fit_figure(label: str, vgs: Sequence[float], i_d: Sequence[float], params: DeviceParams | None, *,
                    vgs_at_cc: float | None = None, cc_current: float = CC_CURRENT_A,
                    thresholds: dict | None = None, window: tuple[float, float] | None = None,
                    title: str | None = None) -> Figure:
    """One part: measured points and the fitted curve (log current), thresholds marked, residuals below.

    Parameters
    ----------
    label : str
        The part's name, for the title and legend.
    vgs, i_d : sequence of float
        The fitted points (V, A; status ok, conducting).
    params : DeviceParams or None
        The fitted curve (None: the points alone, e.g. a dud).
    vgs_at_cc : float, optional
        VGS at ``cc_current`` interpolated in the data (the constant-current threshold), marked when given.
    cc_current : float
        Its criterion current (A).
    thresholds : dict, optional
        Other threshold definitions to mark (name -> V, None skipped), e.g. a fit result's ``thresholds``.
    window : (float, float), optional
        The current range (A) the curve was fitted on: points outside it are drawn hollow and left out of the
        residuals' rms.

    Returns
    -------
    matplotlib.figure.Figure
        Two axes: curve (top), relative residuals in % (bottom).
    """
    fig = new_figure(7.0, 5.2)
    grid = fig.add_gridspec(2, 1, height_ratios=(3, 1.3), hspace=0.08)
    ax, res = fig.add_subplot(grid[0]), fig.add_subplot(grid[1])
    v = np.asarray(vgs, dtype=float)
    i = np.asarray(i_d, dtype=float)
    keep = np.isfinite(v) & np.isfinite(i) & (i > 0)
    v, i = v[keep], i[keep]
    inside = np.ones(v.size, dtype=bool) if window is None else (i >= window[0] * (1 - 1e-9)) & (i <= window[1] * (1 + 1e-9))
    ax.semilogy(v[inside], i[inside], "o", ms=3.5, color="#2c3e50", label=f"{label}: measured ({inside.sum()} points)")
    if not inside.all():
        ax.semilogy(v[~inside], i[~inside], "o", ms=3.5, mfc="none", color="#2c3e50",
                    label=f"outside the fitted window ({(~inside).sum()})")
    if params is not None:
        grid_v = np.linspace(v.min(), v.max(), 300) if v.size else np.linspace(params.vth - 0.3, params.vth + 1.5, 300)
        model_i = np.asarray(params.current(grid_v), dtype=float)
        shown = model_i > 0
        ax.semilogy(grid_v[shown], model_i[shown], "-", lw=1.4, color="#d35400", label=f"{params.model} fit")
        ax.axvline(params.vth, color="#8e44ad", lw=1, ls="--", label=f"Vth (fit) {params.vth:.4f} V")
        predicted = np.asarray(params.current(v), dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            residual = np.where(predicted > 0, (i / predicted - 1.0) * 100.0, np.nan)
        res.plot(v[inside], residual[inside], "o", ms=3, color="#2c3e50")
        res.plot(v[~inside], residual[~inside], "o", ms=3, mfc="none", color="#2c3e50")
        finite = residual[inside & np.isfinite(residual)]
        if finite.size:
            res.set_title(f"rms {np.sqrt(np.mean(finite ** 2)):.3g} %" + (" in the window" if window else ""),
                          fontsize=8, loc="right", pad=2)
    else:
        res.text(0.5, 0.5, "no fitted curve", ha="center", va="center", transform=res.transAxes)
    styles = iter(((0, (1, 1)), (0, (5, 2, 1, 2)), (0, (3, 3)), (0, (1, 3))))
    for name, value in (thresholds or {}).items():
        if value is not None and name not in ("model", "constant_current"):  # those two are drawn already
            ax.axvline(value, color="#7f8c8d", lw=1, ls=next(styles, ":"), label=f"{name.replace('_', ' ')} {value:.4f} V")
    if vgs_at_cc is not None:
        ax.plot([vgs_at_cc], [cc_current], "s", ms=7, mfc="none", mec="#27ae60", mew=1.8,
                label=f"VGS at {cc_current * 1e6:g} uA: {vgs_at_cc:.4f} V (data)")
    res.axhline(0.0, color="#7f8c8d", lw=0.8)
    if v.size:
        pad = 0.03 * max(v.max() - v.min(), 0.05)
        for axis in (ax, res):
            axis.set_xlim(v.min() - pad, v.max() + pad)
    ax.set_ylabel("ID (A)")
    ax.set_title(title or f"{label}: diode-connected curve and fit")
    ax.grid(True, which="both", alpha=0.3)
    ax.tick_params(labelbottom=False)
    ax.legend(fontsize=7, loc="lower right")
    res.set_xlabel("VGS = VDS (V)")
    res.set_ylabel("residual (%)")
    res.grid(True, alpha=0.3)
    return fig


def outputs_figure(design: Mapping, target: float | None) -> Figure:
    """The design's output currents against the reference (left) and their errors with the target band (right)."""
    outputs = list(design.get("outputs") or [])
    fig = new_figure(9.0, 3.8)
    ax_i, ax_e = fig.add_subplot(1, 2, 1), fig.add_subplot(1, 2, 2)
    names = [str(o["part"]).rsplit("/", 1)[-1] for o in outputs]
    x = np.arange(len(outputs))
    currents = np.array([o["i_out"] for o in outputs], dtype=float) * 1e3
    errors = np.array([o["error"] for o in outputs], dtype=float) * 100.0
    bad = [not o.get("in_compliance", True) for o in outputs]
    colours = ["#c0392b" if b else "#3b6ea5" for b in bad]
    ax_i.bar(x, currents, color=colours)
    ax_i.axhline(design["i_ref"] * 1e3, color="#2c3e50", lw=1, label=f"reference {design['i_ref'] * 1e3:.4g} mA")
    if design.get("i_target"):
        ax_i.axhline(design["i_target"] * 1e3, color="#27ae60", lw=1, ls="--",
                     label=f"target {design['i_target'] * 1e3:.4g} mA")
    if currents.size:
        spread = max(currents.max() - currents.min(), 0.02 * currents.max())
        ax_i.set_ylim(max(0.0, currents.min() - 1.5 * spread), currents.max() + 1.5 * spread)
    ax_i.set_ylabel("output current (mA)")
    ax_i.set_title("Output currents")
    ax_e.bar(x, errors, color=colours)
    if target:
        ax_e.axhspan(-target * 100, target * 100, color="#27ae60", alpha=0.12,
                     label=f"target +/-{target * 100:g} %")
        for sign in (-1, 1):
            ax_e.axhline(sign * target * 100, color="#27ae60", lw=1, ls="--")
    ax_e.axhline(0.0, color="#2c3e50", lw=0.8)
    ax_e.set_ylabel("error vs reference (%)")
    ax_e.set_title("Output errors")
    for axis in (ax_i, ax_e):
        axis.set_xticks(x, names, rotation=45, fontsize=8)
        axis.grid(True, axis="y", alpha=0.3)
        if axis.get_legend_handles_labels()[0]:
            axis.legend(fontsize=7)
    return fig


def monte_carlo_figure(errors: Mapping[str, np.ndarray], target: float | None, samples: int) -> Figure:
    """One histogram per output of its error against the reference over the Monte Carlo draws, target marked."""
    count = max(len(errors), 1)
    cols = min(4, count)
    rows = -(-count // cols)
    fig = new_figure(2.4 * cols + 0.8, 2.1 * rows + 0.6)
    for k, (name, values) in enumerate(errors.items()):
        ax = fig.add_subplot(rows, cols, k + 1)
        pct = np.asarray(values, dtype=float) * 100.0
        ax.hist(pct, bins=30, color="#3b6ea5", edgecolor="white", linewidth=0.3)
        if target:
            for sign in (-1, 1):
                ax.axvline(sign * target * 100, color="#c0392b", lw=1.2, ls="--")
            inside = float(np.mean(np.abs(pct) <= target * 100)) * 100
            ax.set_title(f"{name}: {inside:.0f} % within", fontsize=8)
        else:
            ax.set_title(name, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.set_xlabel("error (%)", fontsize=7)
    if not errors:
        ax = fig.add_subplot()
        ax.text(0.5, 0.5, "no Monte Carlo run", ha="center", va="center", transform=ax.transAxes)
    fig.suptitle(f"Monte Carlo: output error over {samples} draws"
                 + (f" (dashed: target +/-{target * 100:g} %)" if target else ""), fontsize=9)
    return fig
