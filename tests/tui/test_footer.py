"""The footer: every key of the view on screen is shown whole, at the sizes a technician's terminal has."""

from __future__ import annotations

import pytest
from textual.widgets._footer import FooterKey

from benchlab.tui.app import VIEW_ACTIONS, VIEWS

from .conftest import make_app


@pytest.mark.parametrize("size", [(150, 45), (120, 40)])
async def test_every_key_of_the_view_is_shown_whole_in_the_footer(tmp_path, size):
    app = make_app(tmp_path, connect=False)
    async with app.run_test(size=size) as pilot:
        for number, view in enumerate(VIEWS, start=1):
            await pilot.press(f"f{number}")
            await pilot.pause()
            width = app.screen.size.width
            shown = {key.action: key for key in app.screen.query(FooterKey)}
            for action in VIEW_ACTIONS[view] | {"abort", "help", "quit_safely"}:
                assert action in shown, f"{view}: the key of {action} is not in the footer"
                region = shown[action].region
                # a key cut at the right edge (or scrolled out of sight) is of no use to the technician
                assert region.width > 0 and region.right <= width, f"{view}: {action} is cut at {size[0]} columns"


async def test_at_80_by_24_every_view_is_named_and_every_plot_keeps_room(tmp_path):
    # at 80x24 the title bar ended at F5 Sets, the Characterize view's curve had no width at all (form 34 + result 46
    # columns) and the Library view's curve no height (under the residual plot)
    from textual.widgets import Static

    from benchlab.tui.app import VIEW_TITLES

    app = make_app(tmp_path, connect=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        title = str(app.query_one("#title-bar", Static).render())
        assert len(title) <= 80
        for number, view in enumerate(VIEWS, start=1):
            assert f"F{number} {VIEW_TITLES[view]}" in title
        for key, plot in (("f2", "#char-plot"), ("f3", "#hf-plot"), ("f4", "#lib-plot"), ("f7", "#th-plot")):
            await pilot.press(key)
            await pilot.pause()
            region = app.screen.query_one(plot).region
            assert region.width >= 20 and region.height >= 5, f"{plot} is {region.width}x{region.height} at 80x24"
        await pilot.resize_terminal(120, 40)  # the part's curve had one row here, under the residual plot
        await pilot.press("f4")
        await pilot.pause()
        assert app.screen.query_one("#lib-plot").region.height >= 8
        await pilot.resize_terminal(150, 45)
        await pilot.pause()
        assert str(app.query_one("#title-bar", Static).render()).startswith("benchlab")
