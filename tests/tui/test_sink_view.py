"""The Sink view shows the whole design: every line of the report, down to the last caution, can be brought on screen
at the sizes a technician's terminal has (the report was a fixed panel: at 150x45 it ended inside the eye-safety
caution, at 120x40 inside the thermal-runaway one, and its long lines were cut at the right edge)."""

from __future__ import annotations

import pytest
from textual.widgets import Static

from benchlab.library import Library
from benchlab.models import DeviceParams

from .conftest import make_app, type_into


@pytest.mark.parametrize("size", [(150, 45), (120, 40)])
async def test_every_caution_of_the_sink_report_can_be_scrolled_into_view(tmp_path, size):
    path = tmp_path / "lib.db"
    with Library.open(path) as lib:  # two parts of the invented demo stock, hand-entered
        lib.add_part("S01", lot="rack-stock", params=DeviceParams(model="theta", vth=2.512, kp=3.05, theta=0.18))
        lib.add_part("S02", lot="rack-stock", params=DeviceParams(model="theta", vth=2.548, kp=2.94, theta=0.17))
    app = make_app(tmp_path, connect=False, library=str(path))
    async with app.run_test(size=size) as pilot:
        await pilot.press("f6")
        await type_into(pilot, "sink-current", "20m")
        await pilot.pause(0.3)
        assert app.last_design is not None
        text = str(app.query_one("#sink-report", Static).render())
        lines = text.splitlines()
        # the closing caution (codes, datasheets, licensed practice) is the report's last paragraph
        assert "licensed practice" in text and "Eye safety" in text
        box = app.query_one("#sink-scroll")
        # all of it is reachable: the scrolled area holds every line, at its full width
        assert box.virtual_size.height >= len(lines)
        assert box.virtual_size.width >= max(len(line) for line in lines)
        box.scroll_end(animate=False)
        await pilot.pause()
        assert box.scroll_y == box.max_scroll_y and box.max_scroll_y >= len(lines) - box.scrollable_content_region.height
