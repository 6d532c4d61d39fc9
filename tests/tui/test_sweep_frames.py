"""What the UI spends while a sweep runs (the sweep thread needs the GIL): no footer rebuild unless its keys change, and
no plot frame before ``FIRST_FRAME_S``, yet the whole final curve is drawn when the sweep ends
(benchmarks/bench_ui.py measures the speed; these check the behaviour)."""

from __future__ import annotations

from textual.widgets import Input

from benchlab.tui import plot as plot_module
from benchlab.tui.app import KeysFooter

from .conftest import SIZE, connected, make_app, press_outside_fields, until


async def test_a_focus_change_does_not_rebuild_the_footer_but_a_view_change_does(tmp_path):
    app = make_app(tmp_path, connect=False)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f2")
        await pilot.pause()
        footer = app.query_one(KeysFooter)
        builds = []
        original = footer.recompose

        async def counted():
            builds.append(1)
            return await original()

        app.query_one("#label", Input).focus()
        await pilot.pause()
        footer.recompose = counted
        for field in ("#lot", "#vth-min", "#label"):  # from field to field: the same keys shown
            app.query_one(field, Input).focus()
            await pilot.pause()
        assert builds == []  # textual rebuilt the footer on each move
        app.set_focus(None)  # out of the fields: the single-letter keys work again and are shown
        await pilot.pause()
        assert len(builds) == 1
        await pilot.press("f5")
        await pilot.pause()
        assert len(builds) == 2  # the Sets view's keys replace the Characterize view's


async def test_a_short_sweep_is_drawn_once_whole_at_its_end(tmp_path, monkeypatch):
    monkeypatch.setattr(plot_module, "FIRST_FRAME_S", 60.0)  # every sweep here is shorter
    app = make_app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f2")
        plot = app.query_one("#char-plot")
        drawn_while_running = []
        original = plot.draw

        def draw():
            drawn_while_running.append(app.running_tag is not None)
            original()

        plot.draw = draw
        await press_outside_fields(pilot, "r")
        await until(pilot, lambda: app.running_tag is None and app.verdict is not None, 30)
        await pilot.pause()
        assert drawn_while_running and not any(drawn_while_running[:-1])
        # (the last draw, of the points, may come as the sweep ends; the fit's is after it)
        assert len(plot.vgs) == app.last_done.points  # the final curve: every point, and the fit over it
        assert plot.fit_vgs and any("\u2800" < c <= "\u28ff" for c in plot.render().plain)
