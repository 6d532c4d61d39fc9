"""Snapshot tests of every view: SVG screenshots of the app on the simulator, compared with the saved ones in
docs/ui/ (the README shows those). The words on the screen (in order) and the colours used must match; numbers
and plot dots are masked (the simulated parts warm up with real time, so last digits move from run to run). The
Sets and Sink views work on a fixed lot of hand-entered parts (STOCK), so what the designer picks cannot flip
between near-ties of simulated parts. Set BENCHLAB_UPDATE_SNAPSHOTS=1 to save new screenshots after a deliberate
change."""

from __future__ import annotations

import html
import os
import re
from pathlib import Path

import pytest

from benchlab.library import Library
from benchlab.models import DeviceParams

from .conftest import SIZE, connected, make_app, press_outside_fields, type_into, until

DOCS = Path(__file__).resolve().parents[2] / "docs" / "ui"
VIEWS = ("bench", "characterize", "handsfree", "library", "sets", "sink")
KEYS = {"bench": "f1", "characterize": "f2", "handsfree": "f3", "library": "f4", "sets": "f5", "sink": "f6"}
EXACT = ("sets", "sink")  # views of the fixed stock alone: compared with their numbers
# the demo scenario's stock (invented parts): hand-entered curves of six parts already on the shelf
STOCK_LOT = "rack-stock"
STOCK = {"S01": (2.512, 3.05, 0.18), "S02": (2.548, 2.94, 0.17), "S03": (2.513, 3.04, 0.18),
         "S04": (2.601, 3.20, 0.19), "S05": (2.553, 2.97, 0.17), "S06": (2.577, 3.10, 0.16)}


def normalize(svg: str, numbers: bool = False) -> tuple[str, tuple[str, ...]]:
    """The screen's words in order (numbers, unless ``numbers``, and plot dots masked, blanks dropped) and its
    colours."""
    colours = tuple(sorted(set(re.findall(r"fill: (#[0-9a-fA-F]{6})", svg))))
    words = "".join(html.unescape(t) for t in re.findall(r"<text[^>]*>([^<]*)</text>", svg))
    words = re.sub(r"\b[0-9]{2}:[0-9]{2}:[0-9]{2}\b", "hh:mm:ss", words)  # when the status line last asked
    # plot dots and blanks dropped (a plot row with no dot is left out of the SVG), and a line's length with them
    # (a dot drawn on a plot's zero line takes the place of a piece of it)
    words = re.sub(r"[\u2800-\u28ff\s\u00a0]+", "", words)
    words = re.sub(r"\u2500+", "\u2500", words)
    if numbers:
        return words, colours
    words = re.sub(r"[0-9]+(\.[0-9]+)?", "#", words)
    words = re.sub(r"[\u2581-\u258f]", "\u2588", words)  # partial blocks: scroll bars and edges
    words = re.sub(r"#[pnu\u00b5mkM]?(?=(V|A|S|W|K|ohm))", "#", words)  # the SI prefix follows the value
    return words, colours


def _stock_library(path: Path) -> str:
    with Library.open(str(path)) as lib:
        for label, (vth, kp, theta) in STOCK.items():
            lib.add_part(label, lot=STOCK_LOT, params=DeviceParams(model="theta", vth=vth, kp=kp, theta=theta))
    return str(path)


async def _screens(tmp_path) -> dict[str, str]:
    app = make_app(tmp_path, library=_stock_library(tmp_path / "lib.db"))
    shots = {}
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f2")
        await type_into(pilot, "vth-min", "1.0")
        await type_into(pilot, "vth-max", "3.2")
        for _ in range(3):
            await press_outside_fields(pilot, "r")
            await until(pilot, lambda: app.running_tag is None and app.verdict is not None, 30)
            if app.verdict.passed:
                await press_outside_fields(pilot, "a")
            else:
                await type_into(pilot, "reason", "outside the window")
                await press_outside_fields(pilot, "x")
        await press_outside_fields(pilot, "r")
        await until(pilot, lambda: app.running_tag is None and app.verdict is not None, 30)
        await until(pilot, lambda: bool(app.outputs), 5)
        for view in VIEWS:
            await pilot.press(KEYS[view])
            if view == "library":
                app.query_one("#lib-table").focus()
                await pilot.press("down")
            elif view == "sets":
                await type_into(pilot, "sets-current", "5m")
                await type_into(pilot, "sets-lot", STOCK_LOT)
                await press_outside_fields(pilot, "m")
            elif view == "sink":
                await type_into(pilot, "sink-lot", STOCK_LOT)
                await type_into(pilot, "sink-supply", "12")
                await type_into(pilot, "sink-current", "5 mA")
            shots[view] = await steady_screenshot(pilot, view)
    return shots


async def steady_screenshot(pilot, view: str) -> str:
    """The screen as an SVG, with no focus and the status line's clock and text fixed (so it can be compared)."""
    from benchlab.tui.plot import CurvePlot

    app = pilot.app
    app.set_focus(None)
    await pilot.pause(0.4)
    for plot in app.query(CurvePlot):
        # a plot redraws on a timer while points arrive: draw the final state now, or the screenshot shows
        # whichever frame the timer reached (the thermal view's plot after its last run, under load)
        plot.draw_now()
    await pilot.pause(0.2)
    app.status_text = ""
    app.outputs_at = "12:00:00"
    app._status()
    await pilot.pause(0.2)
    return app.export_screenshot(title=f"benchlab ui: {view} view (simulated bench, invented parts)")


async def test_every_view_matches_its_saved_screenshot(tmp_path):
    shots = await _screens(tmp_path)
    if os.environ.get("BENCHLAB_UPDATE_SNAPSHOTS"):
        DOCS.mkdir(parents=True, exist_ok=True)
        for view, svg in shots.items():
            (DOCS / f"{view}.svg").write_text(svg, encoding="utf-8")
        pytest.skip("screenshots saved to docs/ui/")
    for view, svg in shots.items():
        saved = DOCS / f"{view}.svg"
        assert saved.exists(), f"no saved screenshot {saved}; run with BENCHLAB_UPDATE_SNAPSHOTS=1"
        exact = view in EXACT
        now, before = normalize(svg, exact), normalize(saved.read_text(encoding="utf-8"), exact)
        assert now == before, f"the {view} view changed" + (" (numbers included)" if exact else "")
