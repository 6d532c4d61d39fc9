"""Hands-free and an open part: the probe cannot tell it from an empty fixture, so after the handling time and a
margin the app asks; the technician sweeps it anyway (classified open) or marks it open (stored rejected, the
label advances). On the simulator's bag of 3 (seed 1) the second part, Q02, is an open dud (docs/sim.md)."""

from __future__ import annotations

import pytest

from benchlab.kinds import PartClass
from benchlab.services.library import list_parts

from .conftest import SIZE, connected, make_app, press_outside_fields, type_into, until


async def _to_the_question(pilot) -> None:
    app = pilot.app
    await connected(pilot)
    assert app.handle.simulator.core.bag[1].kind == "open"
    await pilot.press("f3")
    await type_into(pilot, "hf-settle", "0.2")
    assert app.query_one("#hf-handling").value == "1"  # taken from the simulated operator
    await press_outside_fields(pilot, "h")
    await until(pilot, lambda: "NO PART SEEN" in str(app.query_one("#hf-big").render()), 30)
    assert len(getattr(app, "_hf_lines", [])) == 1 and app.query_one("#label").value == "Q02"


async def _to_the_end(pilot) -> list[str]:
    app, sim = pilot.app, pilot.app.handle.simulator
    await until(pilot, lambda: any(e.text == "bag used up" for e in sim.log.entries(kind="part"))
                and len(getattr(app, "_hf_lines", [])) == 3, 60)
    await pilot.press("ctrl+k")
    await until(pilot, lambda: app.running_tag is None, 15)
    return list(app._hf_lines)


@pytest.mark.parametrize("key", ["y", "b"])
async def test_no_part_seen_asks_then_sweeps_it_or_marks_it_open(tmp_path, key):
    app = make_app(tmp_path, bag_size=3, handling_s=1.0)
    async with app.run_test(size=SIZE) as pilot:
        await _to_the_question(pilot)
        await press_outside_fields(pilot, key)
        lines = await _to_the_end(pilot)
        assert app.handle.simulator.log.entries(kind="output")[-1].text == "OFF"
    assert [line.split()[0] for line in lines] == ["Q01", "Q02", "Q03"]  # the label went on past the open part
    assert "Q02 FAIL open" in lines[1]
    q02 = {p.label: p for p in list_parts(str(tmp_path / "lib.db"), state="all")}["Q02"]
    assert q02.state == "rejected"
    if key == "y":  # swept: the engine's class of an open part (docs/sweeps.md: no current at any VGS)
        assert q02.classification == PartClass.OPEN and "not swept" not in lines[1]
    else:
        assert "marked open by the technician" in q02.reason and "not swept" in lines[1]
