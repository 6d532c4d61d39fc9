"""Bad input in the terminal UI's forms, driven through textual's pilot (``App.run_test()``) on the simulated bench.

Every field of every form gets the same bad inputs as the CLI (quotes, newlines, very long, non-ASCII, path
separators, ``..``, NUL) and, where a number goes, inf, NaN, a negative number and 1e300; then the form's key is
pressed (or, where the view recomputes as you type, nothing more). What the app did is recorded: the one message
it showed (status line, or the sink report), whether the app is still running (a traceback ends it), whether any
file was written (sessions, library, netlists) and whether any output was switched on (the simulator's own log).
``tests/reliability/test_bad_input.py`` puts the rows into the table of docs/reliability.md.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

from benchlab.services.characterize import SimOptions
from benchlab.tui.app import BenchlabApp, UiOptions

TEXT_INPUTS = {
    "double quote": 'Q"7', "newline": "Q7\nOUTP ON", "300 characters": "Q" * 300, "non-ASCII": "Q\u00e97",
    "slash": "a/b", "backslash": "a\\b", "dot-dot": "..", "NUL": "Q\x007", "SCPI separator": "Q7;OUTP ON",
}
# not finite: the quantity reader refuses them the same way in every field, so they go into the number fields in
# turn; out of range: each field's own limits, so every number field gets each
NOT_FINITE = {"inf": "inf", "NaN": "nan"}
NUMBER_INPUTS = {"negative": "-1", "1e300": "1e300"}
GOOD_VALUES = "(the good values)"

# the good value of every field: each try starts from these, so only the bad value can be refused
GOOD = {"lot": "led-rack", "label": "Q01", "vth-min": "", "vth-max": "", "kp-min": "", "leak-max": "", "hyst-max": "",
        "hf-settle": "0.2", "lib-gm-at": "0.02", "sets-current": "0.02", "sets-current-max": "", "sets-size": "2",
        "sets-lot": "", "sink-supply": "24", "sink-current": "0.02", "sink-resistor": "", "sink-outputs": "1",
        "sink-series": "E24", "sink-degeneration": "0", "sink-mismatch": "", "sink-load": "", "sink-lot": ""}
VIEW_FIELDS = {"characterize": ("lot", "label", "vth-min", "vth-max", "kp-min", "leak-max", "hyst-max"),
               "handsfree": ("hf-settle",), "library": ("lib-gm-at",),
               "sets": ("sets-current", "sets-current-max", "sets-size", "sets-lot"),
               "sink": ("sink-supply", "sink-current", "sink-resistor", "sink-outputs", "sink-series",
                        "sink-degeneration", "sink-mismatch", "sink-load", "sink-lot")}

# (form, view, its fields, key pressed after typing (None: the view acts as you type), and the inputs that are
# fine in a field: recorded as accepted, not refused)
FORMS: list[tuple[str, str, tuple[str, ...], str | None, dict[str, set[str]]]] = [
    ("lot name (Characterize, r)", "characterize", ("lot",), "r", {}),
    ("label pattern (Characterize, r)", "characterize", ("label",), "r", {}),
    # a negative threshold is a number a window may hold (P-channel parts; common practice), and a huge one
    # only fails every part
    ("acceptance window (Characterize, r)", "characterize", ("vth-min", "vth-max", "kp-min", "leak-max", "hyst-max"),
     "r", {"vth-min": {"negative", "1e300"}, "vth-max": {"negative", "1e300"}, "kp-min": {"1e300"},
           "leak-max": {"1e300"}, "hyst-max": {"1e300"}}),
    ("hands-free settle time (h)", "handsfree", ("hf-settle",), "h", {}),
    # gm or sets at an absurd current (1e300 A, above the 1 kA bound of benchlab/bounds.py) are refused: the sets
    # at 1e300 A overflowed in the matcher (a RuntimeWarning on the way to a meaningless table)
    ("library gm current (as typed)", "library", ("lib-gm-at",), None, {}),
    ("sets form (m)", "sets", VIEW_FIELDS["sets"], "m", {}),
    ("sink form (w: save)", "sink", VIEW_FIELDS["sink"], "w", {}),
]
NUMBER_FIELDS = {"vth-min", "vth-max", "kp-min", "leak-max", "hyst-max", "hf-settle", "lib-gm-at", "sets-current",
                 "sets-current-max", "sets-size", "sink-supply", "sink-current", "sink-resistor", "sink-outputs",
                 "sink-degeneration", "sink-mismatch", "sink-load"}


@dataclass
class Seen:
    """What one bad value in one field got."""

    message: str  # the one message shown ("" when none)
    lines: int  # lines of that message
    crashed: str  # the exception that ended the app ("" when it runs on)
    written: list[str]
    powered: bool
    accepted: bool  # the app went ahead (no error shown)
    field_name: str = ""  # the label beside the field


def _files(folder: Path) -> dict[str, tuple[int, int]]:
    return {str(p.relative_to(folder)): (p.stat().st_size, p.stat().st_mtime_ns) for p in folder.rglob("*")
            if p.is_file()}


def _plain(content) -> str:
    text = getattr(content, "plain", None)
    return text if isinstance(text, str) else str(content)


def _stock(library: Path) -> None:
    """Six in-stock parts (invented values), so the sets and sink forms can succeed with good input."""
    from benchlab.services.library import add_part

    for n, vth in enumerate((2.90, 2.91, 2.93, 2.95, 2.96, 2.99), start=1):
        add_part(str(library), f"Q{n:02d}", lot="led-rack", vth=vth, kp=1.2)


def make_app(folder: Path) -> BenchlabApp:
    return BenchlabApp(UiOptions(sim=SimOptions(bag_size=4), library=str(folder / "lib.db"),
                                 sessions=str(folder / "sessions"), lot="led-rack",
                                 plan_options={"points": 8, "max_current_a": 0.05}))


async def _until(pilot, condition, timeout_s: float = 30.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"the app did not get there in {timeout_s} s: {pilot.app.status_text}")
        await pilot.pause(0.02)


def _outputs_on(app) -> int:
    """Outputs switched on so far, from the app's simulator's log (none once the app let its bench go)."""
    if app.handle is None or app.handle.simulator is None:
        return 0
    return len([e for e in app.handle.simulator.log.entries(kind="output") if e.text == "ON"])


async def _settle(pilot, app) -> None:
    if app.running_tag is not None:  # accepted: a sweep or hands-free run started; stop it, output off
        await pilot.press("ctrl+k")
        await _until(pilot, lambda: app.running_tag is None)


def _seen(app, message: str, before: dict, on_before: int, folder: Path, error: bool) -> Seen:
    text = message.replace("[b red]error:[/] ", "").replace("[b red]Cannot design this:[/] ", "")
    return Seen(message=text, lines=len(message.splitlines()), crashed="",
                written=sorted(k for k, v in _files(folder).items() if before.get(k) != v),
                powered=_outputs_on(app) != on_before, accepted=not error)


async def _try(pilot, folder: Path, view: str, field: str, value: str, key: str | None) -> Seen:
    app = pilot.app
    if app.current_view != view:
        app.action_view(view)
    for name in VIEW_FIELDS[view]:
        widget = app.query_one(f"#{name}")
        if widget.value != GOOD[name]:
            widget.value = GOOD[name]
    sink = app.query_one("#sink-report")
    sink.update("")
    app.status_text = ""
    before, on_before = _files(folder), _outputs_on(app)
    app.query_one(f"#{field}").value = value
    await pilot.pause()
    name = app.query_one(f"#{field}").name or field
    if key is not None:
        app.set_focus(None)  # single-letter keys act when no field has the cursor
        await pilot.press(key)
    await _settle(pilot, app)
    message = app.status_text
    report = _plain(sink.content)
    if "Cannot design" in report:
        message = report
    seen = _seen(app, message, before, on_before, folder, "error:" in message or "Cannot design" in message)
    seen.field_name = name
    return seen


async def _connect(pilot, folder: Path, bench_path: str, sim) -> Seen:
    """``c`` on the Bench view with ``bench_path`` as the app's bench file (``--bench``)."""
    app = pilot.app
    app.action_view("bench")
    app.options.bench_path, app.status_text = bench_path, ""
    before, on_before = _files(folder), _outputs_on(app)
    sim_on = len([e for e in sim.log.entries(kind="output") if e.text == "ON"])
    app.set_focus(None)
    await pilot.press("c")
    await _until(pilot, lambda: "error:" in app.status_text or "connected" in app.status_text, 20)
    seen = _seen(app, app.status_text, before, on_before, folder, "error:" in app.status_text)
    # the bench files point at ``sim``; the app let its own simulator go (outputs off) before connecting
    seen.powered = sim_on != len([e for e in sim.log.entries(kind="output") if e.text == "ON"])
    seen.field_name = "--bench"
    return seen


async def try_forms(folder: Path, bench_files: dict[str, str] | None = None, sim=None) -> list[tuple]:
    """Every form with every bad input; returns (form, input, field, what it got) in order.

    Each text input goes into one field of each form (taking the fields in turn) and each number input into
    every number field; ``bench_files`` (input name -> path) are connected with ``c`` last (each against
    ``sim``, whose log shows whether anything was switched on)."""
    library = folder / "lib.db"
    _stock(library)
    todo = []
    for form, view, fields, key, fine in FORMS:
        todo.append((form, view, key, fields[0], GOOD_VALUES, GOOD[fields[0]], fine))  # the form as it comes: accepted
        for n, (what, value) in enumerate(TEXT_INPUTS.items()):
            todo.append((form, view, key, fields[n % len(fields)], what, value, fine))
        numbers = [name for name in fields if name in NUMBER_FIELDS]
        for n, (what, value) in enumerate(NOT_FINITE.items() if numbers else ()):
            todo.append((form, view, key, numbers[n % len(numbers)], what, value, fine))
        for name in fields:
            if name in NUMBER_FIELDS:
                todo += [(form, view, key, name, what, value, fine) for what, value in NUMBER_INPUTS.items()]
    todo += [("bench connect (Bench, c)", "bench", "c", "--bench", what, path, {})
             for what, path in (bench_files or {}).items()]
    results: list[tuple] = []
    while todo:
        app = make_app(folder)
        try:
            async with app.run_test(size=(150, 46)) as pilot:
                await _until(pilot, lambda: app.handle is not None)
                while todo:
                    form, view, key, field, what, value, fine = todo.pop(0)
                    try:
                        if field == "--bench":
                            seen = await _connect(pilot, folder, value, sim)
                        else:
                            seen = await _try(pilot, folder, view, field, value, key)
                    except Exception as exc:  # noqa: BLE001 - the app ended under the pilot
                        seen = Seen("", 0, type(exc).__name__, [], False, False)
                    if app._exception is not None or not app.is_running:
                        seen.crashed = type(app._exception).__name__ if app._exception else "app ended"
                    results.append((form, what, field, seen, what == GOOD_VALUES or what in fine.get(field, ())))
                    if seen.crashed or (app.handle is None and todo and todo[0][3] != "--bench"):
                        break  # a new app (and simulator) for the rest
        except Exception as exc:  # noqa: BLE001 - what a user would see as a traceback: recorded
            if results and not results[-1][3].crashed:
                results[-1][3].crashed = type(exc).__name__
        finally:
            if app.handle is not None:
                app.handle.close()
    return results
