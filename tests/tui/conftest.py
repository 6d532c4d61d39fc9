"""Helpers for the terminal-UI tests: the app on the in-process simulator (reached over TCP through pyvisa-py)."""

from __future__ import annotations

import asyncio
import time

import pytest

from benchlab.services.characterize import SimOptions
from benchlab.tui.app import BenchlabApp, UiOptions

SIZE = (150, 46)


def make_app(tmp_path, *, connect: bool = True, points: int = 12, **sim) -> BenchlabApp:
    sim.setdefault("bag_size", 10)
    return BenchlabApp(UiOptions(sim=SimOptions(**sim), library=str(tmp_path / "lib.db"),
                                 sessions=str(tmp_path / "sessions"), lot="led-rack",
                                 plan_options={"points": points, "max_current_a": 0.05}, connect_at_start=connect))


async def until(pilot, condition, timeout_s: float = 30.0, step: float = 0.05) -> None:
    """Let the app run until ``condition()`` holds (fails the test on timeout)."""
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            pytest.fail(f"timed out after {timeout_s} s waiting for the app; status: {pilot.app.status_text}")
        await pilot.pause(step)


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
