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
