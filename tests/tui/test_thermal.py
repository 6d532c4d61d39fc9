"""Pilot tests of the Thermal view (F7) against the simulated bench over TCP: tempco and Rth run from the UI,
their results land in the library, and the output ends off, also when the abort key stops a run while the part
is heating.

Checks against outside sources: JEDEC JESD51-1 (Electrical Test Method) defines Rth = junction rise / power
measured through a calibrated temperature-sensitive parameter; the issue's tolerances (Rth within 10 % of the
simulator's configured 62 K/W, tempco within 0.3 mV/K of its configured coefficient) are the acceptance figures.
The simulator's mobility law KP ~ T^-1.5 is the SPICE level-1 law (ngspice manual).
"""

from __future__ import annotations

import difflib
import os
import threading

import pytest

from benchlab.library.thermal import measured_thermal
from benchlab.services.library import add_part, open_library

from .conftest import SIZE, connected, make_app, output_log, press_outside_fields, type_into, until
from .test_snapshots import DOCS, normalize, steady_screenshot


def _measured(db: str, label: str) -> dict:
    with open_library(db) as lib:
        return measured_thermal(lib, lib.get_part(label).id)


async def _run(pilot, key: str, timeout_s: float = 60.0) -> None:
    app = pilot.app
    before = app.thermal_tag
    await press_outside_fields(pilot, key)
    await until(pilot, lambda: app.thermal_tag != before, 5)  # started (it may already be done)
    await until(pilot, lambda: app.running_tag is None, timeout_s)


@pytest.mark.parametrize("fixture", ["smu", "resistor"])
async def test_tempco_and_rth_from_the_ui_are_stored_and_the_output_ends_off(tmp_path, fixture):
    db = str(tmp_path / "lib.db")
    add_part(db, "Q01", lot="led-rack", vth=2.5, kp=3.0)  # characterized earlier; its part is in the fixture
    app = make_app(tmp_path, fixture=fixture, library=db)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        truth = app.handle.simulator.current_part
        assert truth.label == "Q01"
        await pilot.press("f7")
        assert app.query_one("#th-part").value == "led-rack/Q01"  # offered: the Library's part, with its lot
        if fixture == "smu":
            await type_into(pilot, "th-temps", "25,60")
            await _run(pilot, "p")
            stored = _measured(db, "Q01")
            # the tolerance: within 0.3 mV/K of the simulator's configured coefficient
            assert stored["vth_tempco"]["value"] == pytest.approx(truth.dvth_dt, abs=0.3e-3)
            assert stored["kp_exponent"]["value"] == pytest.approx(1.5, abs=0.1)  # SPICE level-1 law
            assert stored["vth_tempco"]["stderr"] > 0
        await type_into(pilot, "th-heatsink", "0")
        await _run(pilot, "f")
        stored = _measured(db, "Q01")
        # JESD51-1 electrical method against the configured 62 K/W (the 10 %)
        assert stored["rth"]["value"] == pytest.approx(truth.rth_k_per_w, rel=0.10)
        result = str(app.query_one("#th-result").render())
        assert "pulsed vs DC" in result and "rth" in result
        values = str(app.query_one("#th-values").render()).splitlines()
        sources = {line.split()[0]: line for line in values[1:]}
        assert "measured" in sources["rth"]
        if fixture == "smu":
            assert "measured" in sources["vth_tempco"]
        else:
            assert "default assumption" in sources["vth_tempco"]
        history = app.handle.simulator.log
        role = "smu" if fixture == "smu" else "supply"
        assert history.output_was_ever_on(role) and not history.output_was_left_on()
        if fixture == "smu":
            _check_screenshot(app, await steady_screenshot(pilot, "thermal"))
    assert output_log(app)[-1] == "OFF"


def _check_screenshot(app, svg: str) -> None:
    """The saved docs/ui/thermal.svg (as tests/tui/test_snapshots.py compares the other views)."""
    saved = DOCS / "thermal.svg"
    if os.environ.get("BENCHLAB_UPDATE_SNAPSHOTS"):
        saved.write_text(svg, encoding="utf-8")
        return
    assert saved.exists(), f"no saved screenshot {saved}; run with BENCHLAB_UPDATE_SNAPSHOTS=1"
    now, before = normalize(svg), normalize(saved.read_text(encoding="utf-8"))
    assert now[1] == before[1], "the thermal view's colours changed"
    changed = [line for line in difflib.unified_diff(before[0].split(" "), now[0].split(" "), lineterm="", n=1)]
    assert now[0] == before[0], "the thermal view changed: " + " ".join(changed[2:40])


async def test_abort_while_heating_switches_off_at_once_and_the_run_stops(tmp_path, monkeypatch):
    from benchlab.sweep import thermal_run

    heating, release = threading.Event(), threading.Event()
    real_add = thermal_run.ThermalLog.add

    def add(self, kind, **values):
        real_add(self, kind, **values)
        if values.get("what") == "heating" and not heating.is_set():
            heating.set()
            release.wait(20)  # hold the run here, part powered, until the test has pressed the abort key

    monkeypatch.setattr(thermal_run.ThermalLog, "add", add)
    app = make_app(tmp_path, fixture="smu")
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f7")
        await press_outside_fields(pilot, "f")
        await until(pilot, heating.is_set, 30)
        history = app.handle.simulator.log
        assert history.last_output_state("smu")  # heating: the part is powered
        await pilot.press("ctrl+k")
        await until(pilot, lambda: not history.last_output_state("smu"), 5)  # off at once, the run still held
        release.set()
        await until(pilot, lambda: app.running_tag is None, 30)
        assert "Stopped" in str(app.query_one("#th-result").render())
        assert not history.output_was_left_on()
    assert output_log(app)[-1] == "OFF"


async def test_bad_input_is_one_error_with_nothing_powered_or_written(tmp_path):
    app = make_app(tmp_path, fixture="smu")
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f7")
        await type_into(pilot, "th-temps", "25,abc")
        await press_outside_fields(pilot, "p")
        await pilot.pause(0.2)
        assert app.thermal_tag is None and "error" in app.status_text and "abc" in app.status_text
        # the simulator's block may go up to 100 degC (its thermal.max_fixture_k): 200 is refused before anything
        await type_into(pilot, "th-temps", "25,200")
        await _run(pilot, "p")
        assert "max_fixture_k" in str(app.query_one("#th-result").render())
        assert not app.handle.simulator.log.output_was_ever_on()
        assert not (tmp_path / "sessions").exists()


async def test_a_label_in_two_lots_is_stored_on_the_lot_typed_as_lot_slash_label(tmp_path):
    # the same label in two lots was ambiguous: the run finished and its values were not stored from the UI
    db = str(tmp_path / "lib.db")
    add_part(db, "Q01", lot="led-rack", vth=2.5, kp=3.0)
    add_part(db, "Q01", lot="spare", vth=2.6, kp=3.0)
    app = make_app(tmp_path, fixture="smu", library=db)
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f7")
        await type_into(pilot, "th-part", "spare/Q01")
        await _run(pilot, "f")
        assert output_log(app)[-1] == "OFF"
    assert "rth" in _measured(db, "spare/Q01")
    assert "rth" not in _measured(db, "led-rack/Q01")
