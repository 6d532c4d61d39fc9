"""A curve plot drawn again without new data (a terminal resized, a view shown again) must draw the same curve.

plotext turns the data of a log axis into logarithms in place when it builds the figure, so a second build of the
same figure took the logarithm of the logarithms and raised ``ValueError: math domain error``: resizing the
terminal with a part's curve on screen ended the app with a traceback (found under tmux, 120x40 -> 150x45)."""

from __future__ import annotations

from textual.app import App, ComposeResult

from benchlab.tui.plot import CurvePlot, ResidualPlot


class _PlotApp(App):
    def compose(self) -> ComposeResult:
        yield CurvePlot(id="curve")
        yield ResidualPlot(id="resid")


async def test_a_log_plot_survives_being_drawn_again_at_other_sizes():
    app = _PlotApp()
    async with app.run_test(size=(120, 40)) as pilot:
        curve = app.query_one("#curve", CurvePlot)
        # a diode-connected sweep's shape (invented values): 10 nA to 100 mA over 2.2 .. 3.1 V
        vgs = [2.2 + 0.05 * k for k in range(19)]
        ids = [1e-8 * 10 ** (0.4 * k) for k in range(19)]
        curve.set_points(vgs, ids)
        curve.set_fit(vgs, ids)
        app.query_one("#resid", ResidualPlot).set_points(vgs, [0.1 * (-1) ** k for k in range(19)])
        await pilot.pause()
        for size in ((150, 45), (80, 24), (120, 40)):
            await pilot.resize_terminal(*size)
            await pilot.pause()
            curve.refresh()  # drawn again with no new data
            await pilot.pause()
        shown = curve.render().plain
        assert "ID (A)" in shown and "VGS (V)" in shown and any("\u2800" < c <= "\u28ff" for c in shown)
    assert app.return_code in (None, 0)
