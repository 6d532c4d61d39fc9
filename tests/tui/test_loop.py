"""Pilot tests of the whole terminal UI against the simulated bench over TCP."""

from __future__ import annotations

import json

from benchlab.kinds import PartClass
from benchlab.services.library import list_parts

from .conftest import (SIZE, connected, hands_free_whole_bag, make_app, output_log, press_outside_fields, type_into,
                       until)


async def _sweep(pilot, timeout_s: float = 30.0) -> None:
    await press_outside_fields(pilot, "r")
    await until(pilot, lambda: pilot.app.running_tag is not None or pilot.app.verdict is not None, 5)
    await until(pilot, lambda: pilot.app.running_tag is None, timeout_s)


async def test_whole_loop_characterize_library_sets_sink(tmp_path):
    app = make_app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f2")
        # the acceptance window: power-MOSFET thresholds of 1-4 V (common practice) and the rack's tighter band
        await type_into(pilot, "vth-min", "1.0")
        await type_into(pilot, "vth-max", "3.2")
        truth = []
        decided = {}
        for _ in range(5):
            truth.append(app.handle.simulator.current_part)
            await _sweep(pilot)
            verdict = app.verdict
            assert verdict is not None and verdict.complete
            # the engine's class must be the simulator's truth for its duds (docs/sim.md: open/short/leaky)
            expected = {"good": PartClass.GOOD, "short": PartClass.SHORTED, "open": PartClass.OPEN,
                        "leaky": PartClass.LEAKY}[truth[-1].kind]
            assert verdict.classification is expected
            if verdict.passed:
                await press_outside_fields(pilot, "a")
            else:
                await type_into(pilot, "reason", "outside the window")
                await press_outside_fields(pilot, "x")
            decided[verdict.label] = verdict.passed
            await pilot.pause()
        assert app.query_one("#label").value == "Q06"  # the label advanced once per decision
        stored = {p.label: p.state for p in list_parts(str(tmp_path / "lib.db"), state="all")}
        assert stored == {label: ("in_stock" if ok else "rejected") for label, ok in decided.items()}
        assert sum(decided.values()) >= 2
        # Library view lists them
        await pilot.press("f4")
        await pilot.pause(0.2)
        table = app.query_one("#lib-table")
        assert table.row_count == 5
        # the detail pane: the curve and, beside it, the residuals of the stored fit (measured / fitted - 1)
        app.show_part(f"led-rack/{next(label for label, ok in decided.items() if ok)}")
        await pilot.pause(0.2)
        resid, curve = app.query_one("#lib-resid"), app.query_one("#lib-plot")
        assert 5 <= len(resid.vgs) <= len(curve.vgs) and resid.redraws >= 1
        rms = (sum(r * r for r in resid.ids) / len(resid.ids)) ** 0.5
        assert f"rms {rms:.2f} %" in resid.title and rms < 20  # a good part's fit within 20 % everywhere
        # Sets: a matched pair among the in-stock parts
        await pilot.press("f5")
        await type_into(pilot, "sets-current", "5m")
        await press_outside_fields(pilot, "m")
        await pilot.pause(0.2)
        assert app.query_one("#sets-table").row_count >= 1
        pair = app.sets_found[0]
        assert {pair.ref, *pair.outputs} <= {f"led-rack/{k}" for k, ok in decided.items() if ok}
        await press_outside_fields(pilot, "v")  # reserve the highlighted (best) set
        await pilot.pause(0.2)
        states = {p.spec: p.state for p in list_parts(str(tmp_path / "lib.db"), state="all")}
        assert all(states[spec] == "reserved" for spec in (pair.ref, *pair.outputs))
        # Sink: one output at 5 mA from 12 V, designed from the library as the form changes
        await pilot.press("f6")
        await type_into(pilot, "sink-supply", "12")
        await type_into(pilot, "sink-current", "5 mA")
        await pilot.pause(0.2)
        assert app.last_design is not None
        report = str(app.query_one("#sink-report").render())
        assert "resistor" in report.lower()
        await press_outside_fields(pilot, "e")
        await pilot.pause()
        assert (tmp_path / "sink-1.cir").read_text().strip().lower().endswith(".end")
    assert output_log(app)[-1] == "OFF"


def slow_bench_app(tmp_path):
    """Real-time pace (1 PLC readings take 20 ms) on a slow bench, so a sweep takes seconds and keys meet it running."""
    return make_app(tmp_path, time_scale=1.0, points=80, faults=("slow=0.02",))


async def start_sweep(pilot, app, points: int) -> None:
    """Connect, open Characterize, run the part and wait until ``points`` points have arrived."""
    await connected(pilot)
    await pilot.press("f2")
    await press_outside_fields(pilot, "r")
    await until(pilot, lambda: app.points_seen >= points, 30)


async def test_abort_mid_sweep_leaves_the_output_off(tmp_path):
    app = slow_bench_app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, app, points=3)
        tag = app.running_tag
        await pilot.press("ctrl+k")
        await until(pilot, lambda: app.running_tag is None, 15)
        assert output_log(app)[-1] == "OFF"  # the simulator's own record
        await until(pilot, lambda: app.outputs.get("supply") is False, 5)
        sidecar = json.loads(next((tmp_path / "sessions").glob("*/Q01.json")).read_text())
        assert sidecar["complete"] is False  # stopped early, marked so, points kept
        assert tag is not None
        # an interrupted sweep is judged, never stored: the prompt offers only the retest
        await until(pilot, lambda: app.verdict is not None and "t retest" in app.status_text, 5)
        assert not app.verdict.complete
        assert "a accept" not in app.status_text and "nothing stored" in app.status_text


async def test_keys_are_handled_while_a_sweep_runs(tmp_path):
    app = slow_bench_app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, app, points=2)
        seen = app.points_seen
        for view, key in (("library", "f4"), ("sink", "f6"), ("characterize", "f2")):
            await pilot.press(key)
            assert app.current_view == view and app.running_tag is not None
        await pilot.press("f10")
        await pilot.pause()
        assert app.screen.__class__.__name__ == "HelpScreen" and app.running_tag is not None
        await pilot.press("escape")
        await until(pilot, lambda: app.points_seen > seen, 10)  # the sweep went on meanwhile
        await pilot.press("ctrl+k")
        await until(pilot, lambda: app.running_tag is None, 15)
        assert output_log(app)[-1] == "OFF"


async def test_hands_free_bag_of_ten_with_a_part_pulled(tmp_path):
    app = make_app(tmp_path, handling_s=0.3, faults=("pull=3",))
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        sim = app.handle.simulator
        # hands-free files the parts under the Lot field, as the Characterize loop does (not the start-up lot)
        await pilot.press("f2")
        await type_into(pilot, "lot", "rack-b")
        lines = await hands_free_whole_bag(pilot)
        assert output_log(app)[-1] == "OFF"
    removed = [e.text for e in sim.log.entries(kind="operator")]
    swept = [t for t in removed if "after its sweep" in t]
    pulled = [t for t in removed if "pulled out" in t]
    undetected = [t for t in removed if "not detected" in t]
    # every part of the bag went through the fixture: swept, pulled mid-sweep, or an open part the probe cannot see
    assert len(swept) + len(pulled) + len(undetected) == 10 and len(pulled) == 1, (removed, lines)
    assert len(lines) == len(swept) + len(pulled)
    assert sum("LOST CONTACT" in line and "not stored" in line for line in lines) == 1
    stored = list_parts(str(tmp_path / "lib.db"), state="all")
    assert len(stored) == len(swept)  # nothing stored for the pulled part
    assert {p.lot for p in stored} == {"rack-b"}


async def test_abort_when_idle_says_when_every_output_is_off(tmp_path):
    # Ctrl+K said 'switching every output off' and never that it was done
    app = make_app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("ctrl+k")
        await until(pilot, lambda: "ABORT done: every output switched off" in app.status_text, 10)
        assert output_log(app)[-1:] in ([], ["OFF"])  # the simulator's own record: nothing left on
