"""The benchlab terminal app: seven views, one status line, sweeps in thread workers.

Safety rules kept here: the abort key works from every view (a priority binding) and switches the
outputs off at once; the status line shows the output state the instruments report; only a sweep's
own ``SweepFinished`` (posted from its ``finally``, after the output is off) makes the bench idle;
points of a sweep that is no longer shown are dropped by tag; closing the app aborts first.
"""

from __future__ import annotations

import functools
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from rich.markup import escape
from textual import work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.css.query import NoMatches
from textual.widgets import ContentSwitcher, DataTable, Footer, Input, Static

from benchlab.errors import BenchlabError
from benchlab.names import printable
from benchlab.tui.help import HelpScreen
from benchlab.tui.plot import MAX_REDRAW_HZ
from benchlab.tui.feed import EventFeed
from benchlab.tui.messages import _quiet, Connected, OutputState, Problem
from benchlab.tui.actions import DesignActions
from benchlab.tui.loop import LoopActions
from benchlab.tui.thermal import ThermalActions, ThermalView
from benchlab.tui.views_bench import BenchView, CharacterizeView, HandsFreeView
from benchlab.tui.views_library import LibraryView, SetsView, SinkView

VIEWS = ("bench", "characterize", "handsfree", "library", "sets", "sink", "thermal")
VIEW_TITLES = {"bench": "Bench", "characterize": "Characterize", "handsfree": "Hands-free", "library": "Library",
               "sets": "Sets", "sink": "Sink", "thermal": "Thermal"}
# the keys of each view (the footer shows only the current view's, plus the global ones)
VIEW_ACTIONS = {"bench": {"connect_bench", "connect_sim", "disconnect"},
                "characterize": {"run_sweep", "accept", "retest", "reject", "toggle_scale", "next_part"},
                "handsfree": {"hands_free", "hf_sweep_anyway", "hf_mark_open"},
                "library": {"refresh_library", "sort_library"},
                "sets": {"find_sets", "reserve_set"},
                "sink": {"save_design", "export_netlist"},
                "thermal": {"thermal_tempco", "thermal_rth"}}
STATUS_POLL_S = 1.0
# While a sweep owns the bench the status line asks the instruments less often (each question waits for the
# instrument between the sweep's own commands); it asks once more as soon as the first point shows the output on.
STATUS_POLL_SWEEPING_S = 5.0
# The sweep thread waits on many short socket round trips per point; each time it must win the GIL back from the
# UI thread, which keeps it up to the switch interval (5 ms by default). A shorter interval while the app runs
# more than doubled the fastest simulated sweep inside the UI (benchmarks/bench_ui.py).
SWITCH_INTERVAL_S = 0.0005


class KeysFooter(Footer):
    """The footer, rebuilt only when the keys it shows change.

    textual rebuilds its footer (about 20 widgets and a layout pass of the screen) on every focus change; pressing r
    just after leaving a field put that rebuild inside the sweep, where it took the sweep thread's time
    (benchmarks/bench_ui.py). The keys shown depend on the view, not on which field has the cursor.
    """

    _shown: tuple | None = None

    def bindings_changed(self, screen) -> None:
        shown = tuple((binding.key, binding.action, binding.description, enabled)
                      for (_, binding, enabled, _) in screen.active_bindings.values() if binding.show)
        if shown == self._shown and self.children:
            return
        self._shown = shown
        super().bindings_changed(screen)


@dataclass
class UiOptions:
    """What ``benchlab ui`` was started with."""

    bench_path: str | None = None
    sim: Any = None  # services.characterize.SimOptions for the built-in simulator
    library: str | None = None
    lot: str = "lot-1"
    sessions: str = "sessions"
    plan_options: dict = field(default_factory=dict)
    connect_at_start: bool = True
    operator: str = ""


class BenchlabApp(ThermalActions, LoopActions, DesignActions, App):
    """``benchlab ui``."""

    CSS_PATH = "app.tcss"
    TITLE = "benchlab"
    # below 110 columns the forms and side panels narrow (app.tcss, Screen.-narrow) so every view keeps room for its
    # plot: at 80 columns the Characterize view's curve had no width at all
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (110, "-wide")]
    # below 44 rows the Library view leaves out the residual plot, so the part's curve keeps its height (at 120x40 it
    # had one row)
    VERTICAL_BREAKPOINTS = [(0, "-short"), (44, "-tall")]
    # F1..F7 are listed in the title bar (and on the help screen), not in the footer: there they took the room of
    # the view's own keys, which were cut at the right edge of a 150-column terminal
    BINDINGS = [
        Binding("ctrl+k", "abort", "Abort: output off", priority=True),
        Binding("f1", "view('bench')", "Bench", show=False),
        Binding("f2", "view('characterize')", "Characterize", show=False),
        Binding("f3", "view('handsfree')", "Hands-free", show=False),
        Binding("f4", "view('library')", "Library", show=False),
        Binding("f5", "view('sets')", "Sets", show=False),
        Binding("f6", "view('sink')", "Sink", show=False),
        Binding("f7", "view('thermal')", "Thermal", show=False),
        Binding("f10,question_mark", "help", "Help"),
        Binding("ctrl+q,ctrl+c", "quit_safely", "Quit", priority=True),
        Binding("s", "connect_sim", "Simulator"),
        Binding("c", "connect_bench", "Connect file"),
        Binding("d", "disconnect", "Disconnect"),
        Binding("r", "run_sweep", "Run sweep"),
        Binding("a", "accept", "Accept"),
        Binding("t", "retest", "Retest"),
        Binding("x", "reject", "Reject"),
        Binding("g", "toggle_scale", "Log/linear"),
        Binding("n", "next_part", "Next sim part"),
        Binding("h", "hands_free", "Hands-free on/off"),
        Binding("y", "hf_sweep_anyway", "Sweep anyway"),
        Binding("b", "hf_mark_open", "Mark open"),
        Binding("u", "refresh_library", "Reload"),
        Binding("o", "sort_library", "Sort"),
        Binding("m", "find_sets", "Find sets"),
        Binding("v", "reserve_set", "Reserve set"),
        Binding("w", "save_design", "Save design"),
        Binding("e", "export_netlist", "Export netlist"),
        Binding("p", "thermal_tempco", "Tempco"),
        Binding("f", "thermal_rth", "Rth"),
    ]

    def __init__(self, options: UiOptions | None = None):
        super().__init__()
        self.options = options or UiOptions()
        self.handle = None
        self.plan = None
        self.current_view = "bench"
        self.cancel_event = threading.Event()
        self.idle_event = threading.Event()
        self.idle_event.set()
        self.running_tag: int | None = None  # the sweep (or hands-free run) not yet finished
        self.shown_tag: int | None = None  # whose points are drawn (None after an abort)
        self.next_tag = 1
        self.hands_free_on = False
        self.verdict = None  # the last judged part of the Characterize loop, until accepted / rejected
        self.outputs: dict = {}
        self.outputs_at = ""
        self.status_text = ""
        self.points_seen = 0
        self.hf_counts = {"pass": 0, "fail": 0, "other": 0}
        self.last_done = None
        self.feed = EventFeed()  # the engine's events, pushed by the sweep thread, taken by the redraw tick
        self._plots: dict = {}
        self._polled_at = 0.0

    # ----------------------------------------------------------------------------------- layout
    def compose(self) -> ComposeResult:
        yield Static("", id="title-bar")
        with ContentSwitcher(initial="bench", id="views"):
            yield BenchView(id="bench")
            yield CharacterizeView(id="characterize")
            yield HandsFreeView(id="handsfree")
            yield LibraryView(id="library")
            yield SetsView(id="sets")
            yield SinkView(id="sink")
            yield ThermalView(id="thermal")
        yield Static("", id="status")
        yield KeysFooter(compact=True)

    def on_mount(self) -> None:
        self._switch_interval = sys.getswitchinterval()
        sys.setswitchinterval(SWITCH_INTERVAL_S)
        self._q("#lot", Input).value = self.options.lot
        if self.options.sim is not None and self.options.sim.handling_s:  # the simulated operator's handling time
            self._q("#hf-handling", Input).value = f"{self.options.sim.handling_s:g}"
        self._title()
        self._status()
        self.set_interval(STATUS_POLL_S, self._poll_outputs)
        self.set_interval(1.0 / MAX_REDRAW_HZ, self._take_events)
        if self.options.connect_at_start and (self.options.sim is not None or self.options.bench_path):
            self._connect(self.options.bench_path, self.options.sim)

    def on_unmount(self) -> None:
        sys.setswitchinterval(getattr(self, "_switch_interval", 0.005))

    def _title(self, width: int | None = None) -> None:
        if (self.size.width if width is None else width) < 110:  # every view's key in 80 columns (F7 Thermal was cut off there)
            tabs = " ".join(f"[reverse] F{i + 1} {VIEW_TITLES[v]} [/reverse]" if v == self.current_view
                            else f"F{i + 1} {VIEW_TITLES[v]}" for i, v in enumerate(VIEWS))
            self._q("#title-bar", Static).update(tabs)
            return
        tabs = "  ".join(f"[reverse] F{i + 1} {VIEW_TITLES[v]} [/reverse]" if v == self.current_view
                         else f" F{i + 1} {VIEW_TITLES[v]} " for i, v in enumerate(VIEWS))
        self._q("#title-bar", Static).update(f"[b]benchlab[/b]  {tabs}")

    def on_resize(self, event) -> None:
        self._title(event.size.width)

    def _q(self, selector, expect_type=None):
        """A widget of the views: looked up on the app's own screen, also while the help screen is on top."""
        if not self.screen_stack:
            raise NoMatches(selector)
        base = self.screen_stack[0]
        return base.query_one(selector, expect_type) if expect_type else base.query_one(selector)

    @_quiet
    def _status(self) -> None:
        if self.handle is None:
            bench = "no bench"
        else:
            bench = f"{'simulator' if self.handle.simulator is not None else 'bench'} ({self.handle.config.fixture})"
        if not self.outputs:
            out = "outputs: not read"
        else:
            words = {True: "[b reverse] ON [/]", False: "OFF", None: "[b]NO ANSWER[/]"}
            out = "  ".join(f"{role} output {words[state]}" for role, state in self.outputs.items())
            out += f" (instrument says, {self.outputs_at})"
        busy = "SWEEPING" if self.running_tag is not None else "idle"
        if self.hands_free_on:
            busy = "HANDS-FREE"
        text = f"{bench} | {out} | {busy} | {self.status_text}"
        if text != getattr(self, "_status_shown", None):  # one line of fixed height: no layout pass needed
            self._status_shown = text
            self._q("#status", Static).update(text, layout=False)

    def say(self, text: str) -> None:
        """Show ``text`` (plain, never markup) in the status line, on one line."""
        self.status_text = escape(printable(text, 300))
        self._status()

    def show_error(self, text) -> None:
        """Show an error in one line (never a traceback; a newline or NUL in it is shown as an escape)."""
        self.status_text = f"[b red]error:[/] {escape(printable(text, 300))}"
        self._status()

    # ----------------------------------------------------------------------------------- keys
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        for view, actions in VIEW_ACTIONS.items():
            if action in actions:
                return view == self.current_view  # False hides another view's keys
        return True

    def action_view(self, name: str) -> None:
        self.current_view = name
        self._q("#views", ContentSwitcher).current = name
        self._title()
        self.refresh_bindings()
        if name == "library":
            self.action_refresh_library()
        elif name == "bench":
            self._show_bench()
        elif name == "thermal":
            self.thermal_shown()

    def action_help(self) -> None:
        self.push_screen(HelpScreen(self.BINDINGS))

    def action_abort(self) -> None:
        """From every view: tell the sweep to stop and switch every output off now."""
        sweeping = self.running_tag is not None
        self.shown_tag = None
        self.hands_free_on = False
        self.cancel_event.set()
        self.say("ABORT: switching every output off")
        self._abort_worker(sweeping)

    @work(thread=True, group="abort")
    def _abort_worker(self, sweeping: bool = False) -> None:
        from benchlab.services import station

        problems = station.abort(self.handle, self.cancel_event)
        if problems:
            self.post_message(Problem("could not confirm the output is off: " + "; ".join(problems)))
        elif self.handle is None:
            self.call_from_thread(self.say, "ABORT: no bench connected, nothing to switch off")
        elif not sweeping:  # (a stopped sweep's own verdict line follows, and says what to do next)
            self.call_from_thread(self.say, "ABORT done: every output switched off")
        self._poll_outputs_now()

    def action_quit_safely(self) -> None:
        self.stop_everything()
        self.exit()

    def stop_everything(self) -> list[str]:
        """Cancel any sweep and switch every output off (used on quit and on SIGTERM / SIGHUP)."""
        from benchlab.services import station

        self.cancel_event.set()
        self.hands_free_on = False
        try:
            return station.abort(self.handle, self.cancel_event)
        except BaseException as exc:  # noqa: BLE001 - closing must go on
            return [str(exc)]

    # ----------------------------------------------------------------------------------- bench
    def action_connect_sim(self) -> None:
        from benchlab.services.characterize import SimOptions

        self._connect(None, self.options.sim or SimOptions())

    def action_connect_bench(self) -> None:
        if not self.options.bench_path:
            self.say("no bench file: start with --bench CONFIG (or press s for the simulator)")
            return
        self._connect(self.options.bench_path, None)

    def action_disconnect(self) -> None:
        if self._sweep_running():
            return
        handle, self.handle = self.handle, None
        if handle is not None:
            handle.close()
        self.outputs = {}
        self._show_bench()
        self.say("disconnected (outputs switched off)")

    def _connect(self, bench_path, sim) -> None:
        if self._sweep_running():
            return
        if self.handle is not None:
            self.handle.close()
            self.handle = None
        self.say("connecting...")
        self._connect_worker(bench_path, sim)

    @work(thread=True, exclusive=True, group="connect")
    def _connect_worker(self, bench_path, sim) -> None:
        from benchlab.services import characterize

        try:
            handle, plan = characterize.prepare(bench_path, sim, self.options.plan_options)
        except BenchlabError as exc:
            self.post_message(Problem(str(exc)))
            return
        self.post_message(Connected(handle, plan))

    @_quiet
    def on_connected(self, message: Connected) -> None:
        self.handle, self.plan = message.handle, message.plan
        self._show_bench()
        where = "simulated bench (invented parts)" if self.handle.simulator is not None else "bench"
        self.say(f"connected to the {where}; outputs off")
        self._poll_outputs_now()

    def _show_bench(self) -> None:
        from benchlab.services import station

        summary = station.bench_summary(self.handle) if self.handle is not None else None
        self._q(BenchView).show(summary, self.plan)

    @_quiet
    def on_problem(self, message: Problem) -> None:
        self.show_error(message.text)
        self.notify(message.text, severity="error", timeout=6, markup=False)

    # ----------------------------------------------------------------------------------- status line
    def _poll_outputs(self) -> None:
        if self.handle is None:
            return
        if self.running_tag is not None and time.monotonic() - self._polled_at < STATUS_POLL_SWEEPING_S:
            return
        self._poll_worker()

    def _poll_outputs_now(self) -> None:
        if self.handle is not None:
            from benchlab.services import station

            self._polled_at = time.monotonic()
            try:
                self.post_message(OutputState(station.output_states(self.handle)))
            except BaseException:  # noqa: BLE001 - a status read must never break the app
                pass

    @work(thread=True, exclusive=True, group="status")
    def _poll_worker(self) -> None:
        self._poll_outputs_now()

    @_quiet
    def on_output_state(self, message: OutputState) -> None:
        self.outputs = message.states
        self.outputs_at = time.strftime("%H:%M:%S")
        self._status()

    # ----------------------------------------------------------------------------------- library, sets, sink
    def on_input_changed(self, event: Input.Changed) -> None:
        if event.input.id == "lib-filter" or event.input.id == "lib-gm-at":
            self.action_refresh_library()
        elif event.input.id and event.input.id.startswith("sink-"):
            self.recompute_sink()

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.data_table.id == "lib-table" and event.row_key is not None:
            self.show_part(str(event.row_key.value))


__all__ = ["BenchlabApp", "UiOptions", "VIEWS"]
