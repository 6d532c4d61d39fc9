"""Helpers for the terminal-UI tests: the app on the in-process simulator (reached over TCP through pyvisa-py)."""

from __future__ import annotations

import asyncio
import time

import pytest

from benchlab.services.characterize import SimOptions
from benchlab.tui.app import BenchlabApp, UiOptions

SIZE = (150, 46)


def make_app(tmp_path, *, connect: bool = True, points: int = 12, library: str | None = None, **sim) -> BenchlabApp:
    sim.setdefault("bag_size", 10)
    return BenchlabApp(UiOptions(sim=SimOptions(**sim), library=library or str(tmp_path / "lib.db"),
                                 sessions=str(tmp_path / "sessions"), lot="led-rack",
                                 plan_options={"points": points, "max_current_a": 0.05}, connect_at_start=connect))


async def until(pilot, condition, timeout_s: float = 30.0, step: float = 0.05) -> None:
    """Let the app run until ``condition()`` holds (fails the test on timeout)."""
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            pytest.fail(f"timed out after {timeout_s} s waiting for the app; status: {pilot.app.status_text}")
        await pilot.pause(step)


async def hands_free_whole_bag(pilot) -> list[str]:
    """Start hands-free (0.2 s settle) and let the simulated operator swap parts until the bag is used up; stop
    with Ctrl+K and return the hands-free log lines."""
    app = pilot.app
    await pilot.press("f3")
    await type_into(pilot, "hf-settle", "0.2")
    await press_outside_fields(pilot, "h")
    sim = app.handle.simulator
    # no key from here on: the simulated operator swaps the parts until the bag is used up
    await until(pilot, lambda: sim.core.part_index == -1 and sim.core._pending_index is None
                and any(e.text == "bag used up" for e in sim.log.entries(kind="part")), 120)
    # each part the operator took out after its sweep (or pulled mid-sweep) gets one log line once it is judged and
    # stored; under load that can come well after the part is out, so wait for the lines, not a fixed pause
    taken = sum("after its sweep" in e.text or "pulled out" in e.text for e in sim.log.entries(kind="operator"))
    await until(pilot, lambda: len(getattr(app, "_hf_lines", [])) >= taken, 60)
    await pilot.pause(0.3)
    lines = list(getattr(app, "_hf_lines", []))
    await pilot.press("ctrl+k")
    await until(pilot, lambda: app.running_tag is None, 15)
    return lines


async def connected(pilot) -> None:
    await until(pilot, lambda: pilot.app.handle is not None)


def output_log(app) -> list[str]:
    """ON / OFF changes of the simulated source, from the simulator's own log."""
    return [e.text for e in app.handle.simulator.log.entries(kind="output")]


async def type_into(pilot, input_id: str, text: str) -> None:
    field = pilot.app.query_one(f"#{input_id}")
    field.value = text
    await pilot.pause()


async def press_outside_fields(pilot, *keys: str) -> None:
    """Single-letter keys act when no text field has the cursor (as the help screen says)."""
    pilot.app.set_focus(None)
    await pilot.press(*keys)
