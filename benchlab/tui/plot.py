"""The curve plot: a plotext widget fed with buffered points and redrawn at most ``MAX_REDRAW_HZ``.

Rendering holds the GIL: redrawing on every point starves the sweep thread, so points only go
into a buffer and a timer redraws when something changed. Measured (benchmarks/bench_ui.py, a
150x46 screen): a frame with the plot costs tens of ms of the GIL, so 10 redraws a second took
the simulator's fastest sweep to 0.3x its headless rate, 4 a second to about 0.7x.
"""

from __future__ import annotations

import math

from textual_plotext import PlotextPlot

MAX_REDRAW_HZ = 4.0


class CurvePlot(PlotextPlot):
    """ID against VGS, log or linear; measured points and optionally a fitted curve."""

    def __init__(self, title: str = "ID vs VGS", **kwargs):
        super().__init__(**kwargs)
        self.title = title
        self.log_scale = True
        self.vgs: list[float] = []
        self.ids: list[float] = []
        self.fit_vgs: list[float] = []
        self.fit_ids: list[float] = []
        self.redraws = 0
        self._dirty = True

    def on_mount(self) -> None:
        self.set_interval(1.0 / MAX_REDRAW_HZ, self._redraw_if_dirty)

    # -- data ------------------------------------------------------------------------------
    def clear_points(self) -> None:
        self.vgs, self.ids, self.fit_vgs, self.fit_ids = [], [], [], []
        self._dirty = True

    def add_point(self, vgs: float, i_d: float) -> None:
        """Buffer one point (drawn at the next tick)."""
        self.vgs.append(vgs)
        self.ids.append(i_d)
        self._dirty = True

    def set_points(self, vgs, ids) -> None:
        self.vgs, self.ids = list(vgs), list(ids)
        self._dirty = True

    def set_fit(self, vgs, ids) -> None:
        self.fit_vgs, self.fit_ids = list(vgs), list(ids)
        self._dirty = True

    def toggle_scale(self) -> None:
        self.log_scale = not self.log_scale
        self._dirty = True

    # -- drawing ---------------------------------------------------------------------------
    def _redraw_if_dirty(self) -> None:
        if self._dirty:
            self._dirty = False
            self.draw()

    def draw(self) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        keep = [(v, i) for v, i in zip(self.vgs, self.ids)
                if math.isfinite(v) and math.isfinite(i) and (i > 0 or not self.log_scale)]
        # plotext cannot draw an empty log axis: an empty plot is drawn linear
        plt.yscale("log" if self.log_scale and keep else "linear")
        plt.title(f"{self.title} ({'log' if self.log_scale else 'linear'} ID)")
        plt.xlabel("VGS (V)")
        plt.ylabel("ID (A)")
        if keep:
            plt.scatter([v for v, _ in keep], [i for _, i in keep], marker="braille", label="measured")
        fit = [(v, i) for v, i in zip(self.fit_vgs, self.fit_ids) if math.isfinite(i) and (i > 0 or not self.log_scale)]
        if fit:
            plt.plot([v for v, _ in fit], [i for _, i in fit], marker="braille", label="fit")
        self.redraws += 1
        self.refresh()
