"""A hands-free bag goes on when the shared library is out of reach: each sweep stays on disk and imports later."""

from __future__ import annotations

import socket

from benchlab.services.characterize import SimOptions
from benchlab.services.library import import_sessions, list_parts
from benchlab.tui.app import BenchlabApp, UiOptions

from .conftest import SIZE, connected, press_outside_fields, type_into, until


async def test_hands_free_keeps_sweeping_when_the_library_server_is_down(tmp_path):
    with socket.socket() as s:  # a port nothing listens on: the library server is down
        s.bind(("127.0.0.1", 0))
        down = f"postgresql://bench1@127.0.0.1:{s.getsockname()[1]}/lab_parts"
    app = BenchlabApp(UiOptions(sim=SimOptions(bag_size=3, handling_s=0.3), library=down,
                                sessions=str(tmp_path / "sessions"), lot="led-rack",
                                plan_options={"points": 12, "max_current_a": 0.05}))
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f3")
        await type_into(pilot, "hf-settle", "0.2")
        await press_outside_fields(pilot, "h")
        sim = app.handle.simulator
        await until(pilot, lambda: any(e.text == "bag used up" for e in sim.log.entries(kind="part")), 120)
        await pilot.pause(0.5)
        lines = list(getattr(app, "_hf_lines", []))
        await pilot.press("ctrl+k")
        await until(pilot, lambda: app.running_tag is None, 15)
    kept = [line for line in lines if "not stored in the library" in line and "cannot reach the library" in line]
    swept = [e.text for e in sim.log.entries(kind="operator") if "after its sweep" in e.text]
    assert swept and len(kept) == len(swept)  # every swept part said so, and the bag went on to the end
    # the sessions on disk import later into a library that is reachable
    summary = import_sessions(str(tmp_path / "later.db"), [str(tmp_path / "sessions")])
    assert len(summary.sweeps) == len(swept)
    assert len(list_parts(str(tmp_path / "later.db"), state="all")) == len(swept)
