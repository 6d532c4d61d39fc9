"""The terminal UI on a shared library: a hands-free bag goes on when the library server is out of reach (each
sweep stays on disk and imports later), and the Library and Sets views read a PostgreSQL library."""

from __future__ import annotations

import socket

from benchlab.services.library import import_sessions, list_parts
from benchlab.tui.app import BenchlabApp, UiOptions

from .conftest import SIZE, connected, hands_free_whole_bag, make_app, press_outside_fields, type_into, until


async def test_hands_free_keeps_sweeping_when_the_library_server_is_down(tmp_path):
    with socket.socket() as s:  # a port nothing listens on: the library server is down
        s.bind(("127.0.0.1", 0))
        down = f"postgresql://bench1@127.0.0.1:{s.getsockname()[1]}/lab_parts"
    app = make_app(tmp_path, library=down, bag_size=3, handling_s=0.3)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        sim = app.handle.simulator
        lines = await hands_free_whole_bag(pilot)
    kept = [line for line in lines if "not stored in the library" in line and "cannot reach the library" in line]
    swept = [e.text for e in sim.log.entries(kind="operator") if "after its sweep" in e.text]
    assert swept and len(kept) == len(swept)  # every swept part said so, and the bag went on to the end
    # the sessions on disk import later into a library that is reachable
    summary = import_sessions(str(tmp_path / "later.db"), [str(tmp_path / "sessions")])
    assert len(summary.sweeps) == len(swept)
    assert len(list_parts(str(tmp_path / "later.db"), state="all")) == len(swept)


async def test_library_and_sets_views_work_on_a_shared_postgresql_library(fresh_postgres):
    from benchlab.library import Library
    from benchlab.models import DeviceParams

    url = fresh_postgres()
    with Library.open(url) as lib:  # invented stock: three close parts and one far off
        for label, vth in (("Q01", 2.900), ("Q02", 2.905), ("Q03", 2.920), ("Q04", 3.400)):
            lib.add_part(label, lot="led-rack", params=DeviceParams("square", vth=vth, kp=1.0))
    app = BenchlabApp(UiOptions(library=url, lot="led-rack", connect_at_start=False))
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f4")
        await pilot.pause(0.3)
        assert app.query_one("#lib-table").row_count == 4
        await pilot.press("f5")
        await type_into(pilot, "sets-current", "5m")
        await press_outside_fields(pilot, "m")
        await until(pilot, lambda: bool(getattr(app, "sets_found", None)), 15)
        pair = app.sets_found[0]
        assert {pair.ref, *pair.outputs} == {"led-rack/Q01", "led-rack/Q02"}  # the closest thresholds
        # another engineer reserves Q02 for a design of theirs while this screen still shows the pair
        with Library.open(url, operator="alice") as other:
            theirs = other.record_design({"kind": "sink"}, ["led-rack/Q02"])
        await press_outside_fields(pilot, "v")
        await pilot.pause(0.3)
        refusal = app.status_text
        assert f"part Q02 was reserved by design {theirs} at " in refusal and "(alice, lot led-rack)" in refusal
        assert all("led-rack/Q02" not in (s.ref, *s.outputs) for s in app.sets_found)  # searched again
        with Library.open(url) as lib:
            assert lib.get_part("led-rack/Q01").state == "in_stock"  # nothing of the refused set was reserved
        await press_outside_fields(pilot, "v")  # the set found on what is left
        await pilot.pause(0.3)
    with Library.open(url) as lib:
        assert {p.label for p in lib.parts(state="reserved")} == {"Q01", "Q02", "Q03"}
        assert len(lib.designs()) == 2
