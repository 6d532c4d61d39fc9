"""The terminal UI's cost, measured side by side in one run on the simulated bench.

(a) Points per second of the same sweep run headless (``services.characterize.sweep_one``) and inside the UI
    (``benchlab ui`` driven by a pilot; points reach the app in batches, the live plot is redrawn at <= 10 Hz and
    at most 8 % of the time), by the engine's own clock: at real instrument
    time (the case of a bench) and with the simulator not waiting at all (as fast as Python, TCP and the UI allow,
    where any UI cost shows). Aim: UI >= 0.9x headless.
(b) Hands-free on the simulator at real time (time scale 1) with a 3 s handling time: parts per hour, and the tool's
    own time per part = wall time per part - instrument floor (the simulator's virtual time while the sweep's
    output was on: settling and integration) - handling (3 s). The settle wait for a seated part (a setting,
    0.2 s here) is part of the tool's time. Aim: under 0.5 s per part.
Run: ``python benchmarks/bench_ui.py [--parts N]``.
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

from benchlab.services import characterize, handsfree, station
from benchlab.services.characterize import SimOptions
from benchlab.tui.app import BenchlabApp, UiOptions

PLAN = {"points": 60, "max_current_a": 0.1, "down_sweep": True}


def headless_rate(root: Path, repeats: int, time_scale: float = 0.0) -> list[float]:
    rates = []
    handle, plan = characterize.prepare(sim=SimOptions(bag_size=1, time_scale=time_scale), plan_options=PLAN)
    try:
        for n in range(repeats):
            outcome, _ = characterize.sweep_one(handle, plan, f"H{n:02d}", sessions_root=root / "headless", seat=False)
            rates.append(len(outcome.points) / outcome.elapsed_s)
    finally:
        handle.close()
    return rates


async def ui_rate(root: Path, repeats: int, time_scale: float = 0.0) -> tuple[list[float], int]:
    app = BenchlabApp(UiOptions(sim=SimOptions(bag_size=1, time_scale=time_scale), library=str(root / "lib.db"),
                                sessions=str(root / "ui"), plan_options=PLAN))
    rates, redraws = [], 0
    async with app.run_test(size=(150, 46)) as pilot:
        while app.handle is None:
            await pilot.pause(0.05)
        await pilot.press("f2")
        for n in range(repeats):
            app.query_one("#label").value = f"U{n:02d}"
            app.set_focus(None)
            app.last_done = None
            await pilot.press("r")
            while app.running_tag is None and app.verdict is None:
                await asyncio.sleep(0.001)
            while app.running_tag is not None:
                await asyncio.sleep(0.005)
            rates.append(app.last_done.points / app.last_done.elapsed_s)  # the engine's own clock, as headless
        redraws = app.query_one("#char-plot").redraws
    return rates, redraws


def hands_free_rate(root: Path, parts: int, handling_s: float, settle_s: float) -> None:
    # the default 40-part bag of seed 1 has no open part among its first 8 (an open part looks like an empty
    # fixture to the probe and would add the operator's wait to the cycle)
    handle, plan = characterize.prepare(sim=SimOptions(time_scale=1.0, handling_s=handling_s),
                                        plan_options={"points": 24, "max_current_a": 0.1})
    sim = handle.simulator
    starts: list[float] = []

    def on_status(text):
        if text.startswith("sweeping"):
            starts.append(time.perf_counter())

    try:
        settings = handsfree.HandsFreeSettings(settle_s=settle_s, poll_s=0.05, idle_timeout_s=4 * handling_s + 10,
                                               max_parts=parts)
        state = handsfree.hands_free(handle, plan, station.AcceptanceWindow(), station.LabelPattern(), lot="bench",
                                     sessions_root=root / "hf", library=str(root / "hf.db"), settings=settings,
                                     cancel=threading.Event(), on_status=on_status)
    finally:
        handle.close()
    cycle = (starts[-1] - starts[0]) / (len(starts) - 1)  # from one sweep's start to the next
    floor = _instrument_floor(sim)
    tool = cycle - floor - handling_s
    print(f"(b) hands-free at real time, handling {handling_s:g} s, settle {settle_s:g} s, {state.parts} parts: "
          f"{cycle:.2f} s per part = {3600 / cycle:.0f} parts per hour")
    print(f"    instrument floor {floor:.2f} s per part (the simulator's virtual time with the sweep's output on), "
          f"handling {handling_s:g} s -> the tool's own time {tool:.2f} s per part, of which {settle_s:g} s is the "
          f"settle wait chosen (aim < 0.5 s)")


def _instrument_floor(sim) -> float:
    """Mean virtual seconds per sweep between a sweep's output ON and OFF with a sweep-sized current limit."""
    entries = sim.log.entries()
    spans, on_at, limit = [], None, 0.0
    for e in entries:
        if e.role == "supply" and e.kind == "command" and e.text.upper().startswith("CURR"):
            try:
                limit = float(e.text.split()[-1])
            except ValueError:
                pass
        if e.kind == "output" and e.text == "ON" and limit > 2e-3:
            on_at = e.virtual_s
        elif e.kind == "output" and e.text == "OFF" and on_at is not None:
            spans.append(e.virtual_s - on_at)
            on_at = None
    return statistics.mean(spans) if spans else 0.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--parts", type=int, default=6)
    parser.add_argument("--settle", type=float, default=0.2)
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp(prefix="bench-ui-"))
    for scale, what in ((1.0, "at real instrument time (1 PLC per reading)"), (0.0, "simulator not waiting")):
        headless, ui = [], []
        for _ in range(args.repeats):  # interleaved, so a busy machine slows both alike
            headless += headless_rate(root, 1, scale)
            rates, redraws = asyncio.run(ui_rate(root, 1, scale))
            ui += rates
        h, u = statistics.median(headless), statistics.median(ui)
        print(f"(a) same sweep ({PLAN['points']} target points up and down), {what}, median of {args.repeats}: "
              f"headless {h:.0f} points/s, in the UI {u:.0f} points/s -> ratio {u / h:.2f} (aim >= 0.9)")
    hands_free_rate(root, args.parts, handling_s=3.0, settle_s=args.settle)


if __name__ == "__main__":
    main()
