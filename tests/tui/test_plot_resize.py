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


async def test_the_log_axis_is_labelled_in_whole_decades_with_si_prefixes():
    # plotext's own labels were values like 0.09631063384000072835622319189497 (34 characters, the Library view's
    # part curve at 120 columns), which left the curve a dozen columns
    app = _PlotApp()
    async with app.run_test(size=(120, 40)) as pilot:
        curve = app.query_one("#curve", CurvePlot)
        curve.set_points([2.2 + 0.02 * k for k in range(50)], [min(1e-9 * 10 ** (0.16 * k), 0.0963) for k in range(50)])
        await pilot.pause()
        rows = curve.render().plain.splitlines()
        labels = [row.split("\u2524")[0].strip() for row in rows if "\u2524" in row]  # the text left of a tick
        assert labels and all(len(label) <= 7 for label in labels), labels
        # 1 nA .. 10 mA are the decades inside 1 nA .. 96.3 mA (SI prefixes, IEC 80000-1 / BIPM SI brochure)
        assert labels[0] == "10 mA" and labels[-1] == "1 nA"


async def test_the_fit_is_drawn_down_to_a_decade_below_the_measured_points():
    # the Characterize view's fit reached 1e-28 A at VGS 0, so the axis ran 1e-28 A .. 10 mA and the measured points
    # took its top third
    app = _PlotApp()
    async with app.run_test(size=(120, 40)) as pilot:
        curve = app.query_one("#curve", CurvePlot)
        vgs = [2.2 + 0.05 * k for k in range(19)]
        curve.set_points(vgs, [1e-8 * 10 ** (0.4 * k) for k in range(19)])
        curve.set_fit([0.1 * k for k in range(32)], [1e-30 * 10 ** (k * 0.9) for k in range(32)])
        await pilot.pause()
        labels = [row.split("\u2524")[0].strip() for row in curve.render().plain.splitlines() if "\u2524" in row]
        assert labels[-1] in ("1 nA", "10 nA"), labels
