"""The benchlab terminal app: six views, one status line, sweeps in thread workers.

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
from benchlab.tui.help import HelpScreen
from benchlab.tui.plot import MAX_REDRAW_HZ
from benchlab.tui.messages import Connected, HandsFreeNews, OutputState, Problem, SweepEvent, SweepFinished
from benchlab.tui.actions import DesignActions
from benchlab.tui.views_bench import BenchView, CharacterizeView, HandsFreeView
from benchlab.tui.views_library import LibraryView, SetsView, SinkView

def _quiet(handler):
    """A message handler that does nothing once the views are gone (a late message while the app closes)."""

    @functools.wraps(handler)
    def wrapper(self, *args, **kwargs):
        try:
            return handler(self, *args, **kwargs)
        except NoMatches:
            return None
    return wrapper


VIEWS = ("bench", "characterize", "handsfree", "library", "sets", "sink")
VIEW_TITLES = {"bench": "Bench", "characterize": "Characterize", "handsfree": "Hands-free", "library": "Library",
               "sets": "Sets", "sink": "Sink"}
# the keys of each view (the footer shows only the current view's, plus the global ones)
VIEW_ACTIONS = {"bench": {"connect_bench", "connect_sim", "disconnect"},
                "characterize": {"run_sweep", "accept", "retest", "reject", "toggle_scale", "next_part"},
                "handsfree": {"hands_free"},
                "library": {"refresh_library", "sort_library"},
                "sets": {"find_sets", "reserve_set"},
                "sink": {"save_design", "export_netlist"}}
STATUS_POLL_S = 1.0
# The sweep thread waits on many short socket round trips per point; each time it must win the GIL back from the
# UI thread, which keeps it up to the switch interval (5 ms by default). A shorter interval while the app runs
# more than doubled the fastest simulated sweep inside the UI (benchmarks/bench_ui.py).
SWITCH_INTERVAL_S = 0.0005


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


class BenchlabApp(DesignActions, App):
    """``benchlab ui``."""

    CSS_PATH = "app.tcss"
    TITLE = "benchlab"
    BINDINGS = [
        Binding("ctrl+k", "abort", "Abort: output off", priority=True),
        Binding("f1", "view('bench')", "Bench"),
        Binding("f2", "view('characterize')", "Characterize"),
        Binding("f3", "view('handsfree')", "Hands-free"),
        Binding("f4", "view('library')", "Library"),
        Binding("f5", "view('sets')", "Sets"),
        Binding("f6", "view('sink')", "Sink"),
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
        Binding("u", "refresh_library", "Reload"),
        Binding("o", "sort_library", "Sort"),
        Binding("m", "find_sets", "Find sets"),
        Binding("v", "reserve_set", "Reserve set"),
        Binding("w", "save_design", "Save design"),
        Binding("e", "export_netlist", "Export netlist"),
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
        self.live_point = None
        self._plots: dict = {}

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
        yield Static("", id="status")
        yield Footer()

    def on_mount(self) -> None:
        self._switch_interval = sys.getswitchinterval()
        sys.setswitchinterval(SWITCH_INTERVAL_S)
        self._q("#lot", Input).value = self.options.lot
        self._title()
        self._status()
        self.set_interval(STATUS_POLL_S, self._poll_outputs)
        self.set_interval(1.0 / MAX_REDRAW_HZ, self._show_live)
        if self.options.connect_at_start and (self.options.sim is not None or self.options.bench_path):
            self._connect(self.options.bench_path, self.options.sim)

    def on_unmount(self) -> None:
        sys.setswitchinterval(getattr(self, "_switch_interval", 0.005))

    def _title(self) -> None:
        tabs = "  ".join(f"[reverse] F{i + 1} {VIEW_TITLES[v]} [/reverse]" if v == self.current_view
                         else f" F{i + 1} {VIEW_TITLES[v]} " for i, v in enumerate(VIEWS))
        self._q("#title-bar", Static).update(f"[b]benchlab[/b]  {tabs}")

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
        self._q("#status", Static).update(f"{bench} | {out} | {busy} | {self.status_text}")

    def say(self, text: str) -> None:
        """Show ``text`` (plain, never markup) in the status line."""
        self.status_text = escape(str(text))
        self._status()

    def show_error(self, text) -> None:
        """Show an error in one line (never a traceback)."""
        self.status_text = f"[b red]error:[/] {escape(str(text))}"
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

    def action_help(self) -> None:
        self.push_screen(HelpScreen(self.BINDINGS))

    def action_abort(self) -> None:
        """From every view: tell the sweep to stop and switch every output off now."""
        self.shown_tag = None
        self.hands_free_on = False
        self.cancel_event.set()
        self.say("ABORT: switching every output off")
        self._abort_worker()

    @work(thread=True, group="abort")
    def _abort_worker(self) -> None:
        from benchlab.services import station

        problems = station.abort(self.handle, self.cancel_event)
        if problems:
            self.post_message(Problem("could not confirm the output is off: " + "; ".join(problems)))
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
        if self.handle is not None:
            self._poll_worker()

    def _poll_outputs_now(self) -> None:
        if self.handle is not None:
            from benchlab.services import station

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

    # ----------------------------------------------------------------------------------- characterize
    def _sweep_running(self) -> bool:
        if self.running_tag is not None:
            self.say("a sweep is running: wait for it, or abort with Ctrl+K")
            return True
        return False

    def _bench_ready(self) -> bool:
        if self.handle is None:
            self.say("connect a bench first (F1, then s for the simulator)")
            return False
        return not self._sweep_running()

    def _window(self):
        from benchlab.services.station import AcceptanceWindow
        from benchlab.units import parse_quantity

        def value(input_id: str, unit: str):
            text = self._q(f"#{input_id}", Input).value.strip()
            return parse_quantity(text, unit) if text else None

        return AcceptanceWindow(vth_min=value("vth-min", "V"), vth_max=value("vth-max", "V"),
                                kp_min=value("kp-min", ""), leakage_max_a=value("leak-max", "A"),
                                hysteresis_max_v=value("hyst-max", "V"))

    def action_run_sweep(self) -> None:
        from benchlab.services.station import LabelPattern
        from benchlab.sweep.session import check_name

        if not self._bench_ready():
            return
        try:
            label = LabelPattern.parse(self._q("#label", Input).value).label
            lot = check_name("lot name", self._q("#lot", Input).value.strip())
            window = self._window()
        except BenchlabError as exc:
            self.show_error(exc)
            return
        self.verdict = None
        tag = self._start_tag("char-plot")
        self._q("#char-result", Static).update(f"Sweeping {label}... (Ctrl+K aborts)")
        self._sweep_worker(tag, label, lot, window)

    def _start_tag(self, plot_id: str) -> int:
        tag, self.next_tag = self.next_tag, self.next_tag + 1
        self.running_tag = self.shown_tag = tag
        self.cancel_event = threading.Event()
        self.idle_event.clear()
        self.points_seen = 0
        self._q(f"#{plot_id}").clear_points()
        self._status()
        return tag

    @work(thread=True, group="sweep")
    def _sweep_worker(self, tag: int, label: str, lot: str, window) -> None:
        from benchlab.services import characterize, station

        verdict, error, problems = None, None, ()
        try:
            outcome, csv_path = characterize.sweep_one(
                self.handle, self.plan, label, lot=lot, sessions_root=self.options.sessions,
                operator=self.options.operator, on_event=lambda event: self.post_message(SweepEvent(tag, event)),
                cancel=self.cancel_event, seat=False)
            verdict = station.judge(outcome, csv_path.parent, window)
        except BenchlabError as exc:
            error = str(exc)
        except BaseException as exc:  # noqa: BLE001 - shown in the app, never a traceback
            error = f"{type(exc).__name__}: {exc}"
        finally:
            try:
                problems = tuple(str(p) for p in self.handle.bench.safe_off())
            finally:
                self.post_message(SweepFinished(tag, verdict, error, problems))
                self.idle_event.set()

    @_quiet
    def on_sweep_event(self, message: SweepEvent) -> None:
        from benchlab.sweep.records import PointMeasured, SweepDone

        if isinstance(message.event, SweepDone) and message.tag == self.shown_tag:
            self.last_done = message.event  # the engine's own count and time of the finished sweep
        if message.tag != self.shown_tag or not isinstance(message.event, PointMeasured):
            return  # a late point of a sweep no longer shown (aborted): dropped
        event = message.event
        plot_id = "hf-plot" if self.hands_free_on else "char-plot"
        plot = self._plots.get(plot_id)
        if plot is None:  # looked up once: a DOM query per point costs the sweep thread its GIL share
            plot = self._plots[plot_id] = self._q(f"#{plot_id}")
        plot.add_point(event.point.vgs, event.point.id)
        self.points_seen = event.count
        self.live_point = event  # drawn by the 10 Hz timer, like the plot (rendering per point starves the sweep)

    @_quiet
    def _show_live(self) -> None:
        event, self.live_point = self.live_point, None
        if event is not None and not self.hands_free_on:
            self._q(CharacterizeView).live(event.count, event.elapsed_s, event.point.vgs * event.point.id)

    @_quiet
    def on_sweep_finished(self, message: SweepFinished) -> None:
        if message.tag != self.running_tag:
            return
        self.running_tag = None
        self._poll_outputs_now()
        if message.problems:
            self.show_error("WARNING: could not confirm the output is off: " + "; ".join(message.problems))
        if self.hands_free_on or message.verdict is None and message.error is None:
            self.hands_free_on = False
            text = f"Hands-free stopped: {message.error}" if message.error else "Hands-free stopped; output off."
            self._q("#hf-status", Static).update(escape(text) + " Press h to start again.")
            self._status()
            return
        result = self._q("#char-result", Static)
        if message.error:
            result.update(f"[b red]Stopped[/]: {escape(message.error)}\nThe output was switched off.")
            self.show_error(message.error)
            return
        self.verdict = message.verdict
        result.update(self._verdict_text(message.verdict))
        fit = message.verdict.fit if message.verdict else None
        if fit is not None and message.tag == self.shown_tag:
            self._draw_fit(self._q("#char-plot"), fit)
        self.say(f"{message.verdict.label}: {message.verdict.headline()}: a accept, t retest, x reject")

    def _draw_fit(self, plot, fit) -> None:
        import numpy as np

        if plot.vgs:
            vgs = np.linspace(min(plot.vgs), max(plot.vgs), 60)
            plot.set_fit(vgs, [float(fit.params.current(v)) for v in vgs])

    @staticmethod
    def _verdict_text(verdict) -> str:
        from benchlab.units import format_si

        if verdict is None:
            return "No result."
        head = {"PASS": "[b black on green]  PASS  [/]", "FAIL": "[b white on red]  FAIL  [/]"}.get(
            verdict.headline(), f"[b black on yellow]  {verdict.headline()}  [/]")
        lines = [f"{head}  [b]{verdict.label}[/]  {verdict.points} points",
                 f"class  {verdict.classification or 'none'}", f"       {escape(verdict.reason)}"]
        fit = verdict.fit
        if fit is not None:
            err = fit.stderr or {}

            def pm(name, value, unit, scale=1.0):
                e = err.get(name)
                tail = f" +/- {format_si(e * scale, unit)}" if e is not None else ""
                return f"{format_si(value * scale, unit)}{tail}"
            lines += [f"model  {fit.model}", f"Vth    {pm('vth', fit.vth, 'V')}",
                      f"KP     {fit.kp:.4g} A/V^2" + (f" +/- {err['kp']:.2g}" if err.get("kp") else ""),
                      f"THETA  {fit.theta:.3g} 1/V"]
            if fit.gm is not None:
                lines.append(f"gm     {pm('gm', fit.gm, 'S')} at {format_si(fit.at_current, 'A')}")
            if fit.hysteresis_v is not None:
                lines.append(f"hysteresis {format_si(fit.hysteresis_v, 'V')}")
            lines.append(f"flags  {', '.join(fit.flags) or 'none'}")
        elif verdict.fit_problem:
            lines.append(f"no fit: {escape(verdict.fit_problem)}")
        if verdict.leakage_a is not None:
            lines.append(f"leakage {format_si(verdict.leakage_a, 'A')}")
        lines.append(f"VGS bin {verdict.vgs_bin or 'none'} (at 250 uA)")
        for failure in verdict.failures:
            lines.append(f"[red]- {escape(failure)}[/]")
        return "\n".join(lines)

    def _decide(self, accept: bool) -> None:
        from benchlab.services import station

        if self._sweep_running():
            return
        if self.verdict is None:
            self.say("nothing to decide: run a sweep first (r)")
            return
        reason = self._q("#reason", Input).value.strip()
        lot = self._q("#lot", Input).value.strip()
        try:
            note = station.store(self.verdict, self.options.library, lot, accept=accept, reason=reason)
        except BenchlabError as exc:
            self.show_error(exc)
            return
        label_input = self._q("#label", Input)
        label_input.value = station.LabelPattern.parse(label_input.value).advanced().label
        self._q("#reason", Input).value = ""
        self.verdict = None
        self._q("#char-result", Static).update(escape(f"{note}\nNext: {label_input.value}. Press r."))
        self.say(note)
        if self.handle is not None and self.handle.simulator is not None:
            station.load_next_sim_part(self.handle)

    def action_accept(self) -> None:
        self._decide(True)

    def action_reject(self) -> None:
        self._decide(False)

    def action_retest(self) -> None:
        self.verdict = None
        self.action_run_sweep()

    def action_toggle_scale(self) -> None:
        self._q("#char-plot").toggle_scale()

    def action_next_part(self) -> None:
        from benchlab.services import station

        if self._bench_ready() and self.handle.simulator is not None:
            self.say(f"simulator: part {station.load_next_sim_part(self.handle)} seated")

    # ----------------------------------------------------------------------------------- hands-free
    def action_hands_free(self) -> None:
        if self.hands_free_on:
            self.action_abort()
            return
        if not self._bench_ready():
            return
        from benchlab.services.station import HandsFreeSettings, LabelPattern
        from benchlab.units import parse_quantity

        try:
            labels = LabelPattern.parse(self._q("#label", Input).value)
            settle = parse_quantity(self._q("#hf-settle", Input).value or "1", "s")
            window = self._window()
        except BenchlabError as exc:
            self.show_error(exc)
            return
        self.hands_free_on = True
        tag = self._start_tag("hf-plot")
        self._hands_free_worker(tag, labels, window, HandsFreeSettings(settle_s=settle, poll_s=0.1))

    @work(thread=True, group="sweep")
    def _hands_free_worker(self, tag, labels, window, settings) -> None:
        from benchlab.services import station

        def news(text="", verdict=None, note=""):
            self.post_message(HandsFreeNews(tag, text, verdict, note))

        error, problems = None, ()
        try:
            station.hands_free(self.handle, self.plan, window, labels, lot=self.options.lot or "lot-1",
                               sessions_root=self.options.sessions, library=self.options.library, settings=settings,
                               cancel=self.cancel_event, on_event=lambda e: self.post_message(SweepEvent(tag, e)),
                               on_status=lambda text: news(text), on_verdict=lambda v, n: news("", v, n),
                               operator=self.options.operator)
        except BenchlabError as exc:
            error = str(exc)
        except BaseException as exc:  # noqa: BLE001
            error = f"{type(exc).__name__}: {exc}"
        finally:
            try:
                problems = tuple(str(p) for p in self.handle.bench.safe_off())
            finally:
                self.post_message(SweepFinished(tag, None, error, problems))
                self.idle_event.set()

    @_quiet
    def on_hands_free_news(self, message: HandsFreeNews) -> None:
        if message.tag != self.shown_tag:
            return
        view = self._q(HandsFreeView)
        if message.text:
            view.query_one("#hf-status").update(escape(message.text))
            if message.text.startswith("sweeping"):
                self._q("#hf-plot").clear_points()
            return
        v = message.verdict
        head = v.headline()
        kind = {"PASS": "pass", "FAIL": "fail"}.get(head, "other")
        self.hf_counts[kind] += 1
        view.big(escape(f"{v.label}  {head}"), kind)
        log = view.query_one("#hf-log")
        line = f"{v.label} {head} {v.classification or ''} {v.vgs_bin}  ({message.note})"
        self._hf_lines = (getattr(self, "_hf_lines", []) + [line])[-30:]
        counts = f"pass {self.hf_counts['pass']}  fail {self.hf_counts['fail']}  other {self.hf_counts['other']}"
        log.update(escape(counts + "\n" + "\n".join(reversed(self._hf_lines))))
        label_input = self._q("#label", Input)
        from benchlab.services.station import LabelPattern

        label_input.value = LabelPattern.parse(v.label).advanced().label

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
