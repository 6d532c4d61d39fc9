"""Snapshot tests of every view: SVG screenshots of the app on the simulator, compared with the saved ones in
docs/ui/ (the README shows those). The words on the screen (in order) and the colours used must match; numbers
and plot dots are masked (the simulated parts warm up with real time, so last digits move from run to run). Set BENCHLAB_UPDATE_SNAPSHOTS=1 to save new screenshots after a deliberate change."""

from __future__ import annotations

import html
import os
import re
from pathlib import Path

import pytest

from .conftest import SIZE, connected, make_app, press_outside_fields, type_into, until

DOCS = Path(__file__).resolve().parents[2] / "docs" / "ui"
VIEWS = ("bench", "characterize", "handsfree", "library", "sets", "sink")
KEYS = {"bench": "f1", "characterize": "f2", "handsfree": "f3", "library": "f4", "sets": "f5", "sink": "f6"}


def normalize(svg: str) -> tuple[str, tuple[str, ...]]:
    """The screen's words in order (numbers and plot dots masked, blank runs collapsed) and its colours."""
    colours = tuple(sorted(set(re.findall(r"fill: (#[0-9a-fA-F]{6})", svg))))
    words = "".join(html.unescape(t) for t in re.findall(r"<text[^>]*>([^<]*)</text>", svg))
    words = re.sub(r"[0-9]+(\.[0-9]+)?", "#", words)
    words = re.sub(r"[\u2800-\u28ff\s\u00a0]+", " ", words)  # plot dots, blanks
    words = re.sub(r"[\u2581-\u258f]", "\u2588", words)  # partial blocks: scroll bars and edges
    words = re.sub(r"# ?[pnu\u00b5mkM]?(?=(V|A|S|W|ohm)\b)", "# ", words)  # the SI prefix follows the value
    return words, colours


async def _screens(tmp_path) -> dict[str, str]:
    app = make_app(tmp_path)
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
                await press_outside_fields(pilot, "m")
            elif view == "sink":
                await type_into(pilot, "sink-supply", "12")
                await type_into(pilot, "sink-current", "5 mA")
            app.set_focus(None)
            await pilot.pause(0.4)
            app.status_text = ""
            app.outputs_at = "12:00:00"
            app._status()
            await pilot.pause(0.2)
            shots[view] = app.export_screenshot(title=f"benchlab ui: {view} view (simulated bench, invented parts)")
    return shots


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
        now, before = normalize(svg), normalize(saved.read_text(encoding="utf-8"))
        if view == "sink":
            # the designer picks the best-matched parts of the library: near-ties between simulated parts that
            # warmed differently flip its choice and the report's wording, so only the frame is compared
            assert now[1] == before[1], "the sink view's colours changed"
            for words in ("Supply (V)", "Target current (A)", "Degeneration (ohm)", "Current sink design",
                          "CAUTIONS", "w Save design", "e Export"):
                assert words in now[0] and words in before[0], f"the sink view lost '{words}'"
            continue
        assert now == before, f"the {view} view changed"
