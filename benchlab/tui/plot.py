"""The curve plot: a plotext widget fed with buffered points, redrawn when something changed, at most
``MAX_REDRAW_HZ`` and at most ``RENDER_SHARE`` of the time.

Rendering holds the GIL: redrawing on every point starves the sweep thread, so points only go into a buffer and a
redraw is scheduled once. After each render the next waits for ``1 / MAX_REDRAW_HZ`` or for the render's own
cost (thread CPU time) divided by ``RENDER_SHARE``, whichever is longer: on a fast machine the plot moves at
10 frames a second, on a loaded one it slows down instead of taking the sweep's time (benchmarks/bench_ui.py).
With no sweep running (the app's ``running_tag`` is None) every change is drawn at once.
"""

from __future__ import annotations

import math
import time

from textual_plotext import PlotextPlot

from benchlab.units import format_si

MAX_REDRAW_HZ = 10.0
# Rendering the plot costs about 10-20 ms of CPU on a 150x46 screen (plotext builds the figure, rich parses its
# ANSI text, textual cuts it into strips): at most 8 % of the time keeps the sweep thread's share of the GIL.
RENDER_SHARE = 0.08
# A sweep's first frame waits this long after it starts: a sweep over sooner (the simulator not waiting: about 0.4 s)
# is drawn once, whole, at its end instead of in frames that each took the sweep thread's time; at a bench's pace
# (seconds per sweep) the curve appears after half a second and then moves as before (benchmarks/bench_ui.py).
FIRST_FRAME_S = 0.5


def decade_ticks(values, rows: int) -> list[float]:
    """Whole decades (1e-9, 1e-8, ...) inside the range of the positive ``values``, every n-th so that at most about
    one tick falls on every second of ``rows`` rows; empty when no decade lies inside."""
    positive = [v for v in values if v > 0]
    if not positive:
        return []
    low, high = math.ceil(math.log10(min(positive)) - 1e-9), math.floor(math.log10(max(positive)) + 1e-9)
    if high < low:
        return []
    step = max(1, math.ceil((high - low + 1) / max(rows // 2, 2)))
    return [10.0 ** k for k in range(low, high + 1, step)]


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
        self._pending = None  # the scheduled redraw's timer
        self._next_at = 0.0  # time.monotonic() before which no render should start

    def on_mount(self) -> None:
        self._schedule()

    # -- data ------------------------------------------------------------------------------
    def clear_points(self) -> None:
        """Empty the plot; while a sweep runs (a new one starting) its first frame waits ``FIRST_FRAME_S``."""
        self.vgs, self.ids, self.fit_vgs, self.fit_ids = [], [], [], []
        if getattr(self.app, "running_tag", None) is not None:
            if self._pending is not None and self._pending is not True:
                self._pending.stop()
            self._pending = None
            self._next_at = time.monotonic() + FIRST_FRAME_S
        self._changed()

    def add_points(self, vgs, ids) -> None:
        """Buffer points (drawn at the next allowed redraw)."""
        self.vgs.extend(vgs)
        self.ids.extend(ids)
        self._changed()

    def add_point(self, vgs: float, i_d: float) -> None:
        """Buffer one point (drawn at the next allowed redraw)."""
        self.add_points((vgs,), (i_d,))

    def set_points(self, vgs, ids) -> None:
        self.vgs, self.ids = list(vgs), list(ids)
        self._changed()

    def set_fit(self, vgs, ids) -> None:
        self.fit_vgs, self.fit_ids = list(vgs), list(ids)
        self._changed()

    def toggle_scale(self) -> None:
        self.log_scale = not self.log_scale
        self._changed()

    # -- drawing ---------------------------------------------------------------------------
    def draw_now(self) -> None:
        """Draw what changed without waiting for the next allowed redraw (a sweep just ended)."""
        if self._pending is not None and self._pending is not True:
            self._pending.stop()
        self._pending = None
        self._next_at = 0.0
        if self._dirty:
            self._schedule()

    def _changed(self) -> None:
        """Mark the figure out of date and schedule one redraw (none is scheduled twice)."""
        self._dirty = True
        if self._pending is None and self.is_mounted:
            self._schedule()

    def _schedule(self) -> None:
        # the budget only matters while a sweep's thread needs the GIL (the app's running_tag): idle, draw at once
        busy = getattr(self.app, "running_tag", None) is not None
        wait = self._next_at - time.monotonic() if busy else 0.0
        if wait > 0.001:
            self._pending = self.set_timer(wait, self._redraw_if_dirty)
        else:  # (a textual timer of no delay is not allowed)
            self._pending = True
            self.call_later(self._redraw_if_dirty)

    def _redraw_if_dirty(self) -> None:
        self._pending = None
        if self._dirty:
            self._dirty = False
            self.draw()

    def render_lines(self, crop):
        started = time.thread_time()
        lines = super().render_lines(crop)
        cost = time.thread_time() - started  # CPU time of this thread: the GIL held, not the time waited for it
        self._next_at = max(self._next_at, time.monotonic() + max(1.0 / MAX_REDRAW_HZ, cost / RENDER_SHARE))
        return lines

    def render(self):
        # plotext turns a log axis's data into logarithms in place when it builds the figure: a second build of the
        # same figure (the terminal resized, the view shown again) took logarithms of logarithms and raised. So the
        # figure is filled afresh from the buffers before every build.
        self._fill()
        return super().render()

    def draw(self) -> None:
        """Draw the buffered points now (the figure is filled from them at the render)."""
        self.redraws += 1
        self.refresh()

    def _fill(self) -> None:
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
        if self.log_scale and keep:
            # the fit's tail far below the smallest measured current (down to 1e-28 A) squeezed the points into the
            # top of the axis: the fit is drawn down to a decade below the measurements
            floor = min(i for _, i in keep) / 10.0
            fit = [(v, i) for v, i in fit if i >= floor]
        if fit:
            plt.plot([v for v, _ in fit], [i for _, i in fit], marker="braille", label="fit")
        if self.log_scale and keep:
            ticks = decade_ticks([i for _, i in keep] + [i for _, i in fit], self.size.height - 4)
            if ticks:  # whole decades with SI labels (plotext's own were up to 34 digits wide)
                plt.yticks(ticks, [format_si(t, "A") for t in ticks])


class ResidualPlot(CurvePlot):
    """Residuals of a fit against VGS (measured / fitted - 1, in %) around the zero line; ``ids`` hold the %."""

    def __init__(self, title: str = "residual", **kwargs):
        super().__init__(title=title, **kwargs)
        self.log_scale = False

    def toggle_scale(self) -> None:
        """Residuals are always drawn on a linear axis."""

    def _fill(self) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        keep = [(v, r) for v, r in zip(self.vgs, self.ids) if math.isfinite(v) and math.isfinite(r)]
        plt.title(self.title)
        plt.xlabel("VGS (V)")
        plt.ylabel("residual (%)")
        if keep:
            top = max(abs(r) for _, r in keep) * 1.1 or 1.0
            plt.ylim(-top, top)  # symmetric: the zero line sits in the middle, over or under is plain to see
            plt.hline(0.0)
            plt.scatter([v for v, _ in keep], [r for _, r in keep], marker="braille")
