"""The technician's loop of the app (a mixin): Characterize (sweep, judge, accept / retest / reject) and Hands-free.

Sweeps run in ``@work(thread=True)`` workers fed by the engine's ``on_event`` through ``post_message``; each has a
tag, and only its own ``SweepFinished``, posted from the worker's ``finally`` after the output is off, ends it.
"""

from __future__ import annotations

import math
import threading
import time

from rich.markup import escape
from textual import work
from textual.widgets import Input, Static

from benchlab.errors import BenchlabError
from benchlab.tui.feed import NewCurve
from benchlab.tui.messages import HandsFreeNews, SweepFinished, _quiet
from benchlab.tui.views_bench import CharacterizeView, HandsFreeView


LIVE_TEXT_HZ = 4.0  # the point count and elapsed time under the plot, at most this often


class LoopActions:
    """Mixed into :class:`benchlab.tui.app.BenchlabApp`."""

    _live_next_at = 0.0
    _peak_power = 0.0  # W, the most the part in the fixture dissipated in this sweep
    _heating = None  # services.station.PartHeating of the part being swept
    _live_event = None  # the newest point not yet shown in the live line

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

        value = self._quantity  # empty: no limit
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
        self._q("#char-result", Static).update(f"Sweeping {label}... (Ctrl+K aborts)", layout=False)  # fixed size
        self._sweep_worker(tag, label, lot, window)

    def _start_tag(self, plot_id: str) -> int:
        tag, self.next_tag = self.next_tag, self.next_tag + 1
        self.running_tag = self.shown_tag = tag
        self.cancel_event = threading.Event()
        self.idle_event.clear()
        self.points_seen = 0
        self._peak_power, self._heating = 0.0, None
        self._q(f"#{plot_id}").clear_points()
        self._status()
        return tag

    @work(thread=True, group="sweep")
    def _sweep_worker(self, tag: int, label: str, lot: str, window) -> None:
        from benchlab.services import characterize, station

        def sweep():
            self.feed.push(tag, station.part_heating(self.options.library, lot, label))
            outcome, csv_path = characterize.sweep_one(
                self.handle, self.plan, label, lot=lot, sessions_root=self.options.sessions,
                operator=self.options.operator, on_event=self.feed.sink(tag),
                cancel=self.cancel_event, seat=False)
            return station.judge(outcome, csv_path.parent, window)

        self._on_bench(tag, sweep)

    def _on_bench(self, tag: int, job) -> None:
        """Run ``job()`` (in a worker thread); whatever happens, switch off and then post ``SweepFinished``."""
        verdict, error, problems = None, None, ()
        try:
            verdict = job()
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
    def _take_events(self, final: bool = False) -> None:
        """The redraw tick (and, ``final``, a sweep's end): take the engine's events the sweep thread collected."""
        from benchlab.services.station import PartHeating
        from benchlab.sweep.records import PointMeasured, SweepDone

        vgs, ids, last, new_curve = [], [], None, False
        for tag, event in self.feed.take():
            if tag != self.shown_tag:
                continue  # a late event of a sweep no longer shown (aborted): dropped
            if isinstance(event, NewCurve):
                vgs, ids, new_curve = [], [], True
            elif isinstance(event, SweepDone):
                self.last_done = event  # the engine's own count and time of the finished sweep
            elif isinstance(event, PointMeasured):
                vgs.append(event.point.vgs)
                ids.append(event.point.id)
                last = event
                power = event.point.vgs * event.point.id  # diode-connected: VDS = VGS
                if math.isfinite(power):
                    self._peak_power = max(self._peak_power, power)
            elif isinstance(event, PartHeating):
                self._heating = event  # the part's Rth, measured or assumed, looked up as its sweep began
        plot_id = "hf-plot" if self.hands_free_on else "char-plot"
        plot = self._plots.get(plot_id)
        if plot is None:  # looked up once, not on every tick
            plot = self._plots[plot_id] = self._q(f"#{plot_id}")
        if new_curve:
            plot.clear_points()
        if last is not None:
            plot.add_points(vgs, ids)
            if self.points_seen == 0:
                self._poll_worker()  # the output is on now: let the status line show what the instrument says
            self.points_seen = last.count
            self._live_event = last
        if final:
            plot.draw_now()  # the sweep is over: no thread left to share the GIL with
        now = time.monotonic()
        if self._live_event is not None and not self.hands_free_on and (final or now >= self._live_next_at):
            event, self._live_event = self._live_event, None
            self._live_next_at = now + 1.0 / LIVE_TEXT_HZ  # each change redraws part of the screen
            power = event.point.vgs * event.point.id
            self._q(CharacterizeView).live(event.count, event.elapsed_s, power if math.isfinite(power) else None,
                                           self._peak_power, self._heating)

    @_quiet
    def on_sweep_finished(self, message: SweepFinished) -> None:
        if message.tag != self.running_tag:
            return
        self._take_events(final=True)  # the sweep's last points and its end, pushed before this was posted
        self.running_tag = None
        self._poll_outputs_now()
        if message.problems:
            self.show_error("WARNING: could not confirm the output is off: " + "; ".join(message.problems))
        if message.tag == self.thermal_tag:  # a thermal run (tui/thermal.py) shows its own result
            self.thermal_finished(message)
            return
        if self.hands_free_on or message.verdict is None and message.error is None:
            self.hands_free_on = False
            text = f"Hands-free stopped: {message.error}" if message.error else "Hands-free stopped; output off."
            self._q("#hf-status", Static).update(escape(text) + " Press h to start again.")
            if getattr(self, "_hf_asked", False):  # the unanswered question goes with the run
                self._hf_asked = False
                self._q(HandsFreeView).big("", "")
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
            self._q("#char-plot").draw_now()
        # an incomplete sweep is never stored (services/station.store refuses it): offer only what works
        keys = "a accept, t retest, x reject" if message.verdict.storable else "nothing stored; t retest"
        self.say(f"{message.verdict.label}: {message.verdict.headline()}: {keys}")

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
            note = station.store(self.verdict, self.options.library, lot, accept=accept, reason=reason,
                                 operator=self.options.operator or None)
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
        from benchlab.services.handsfree import HandsFreeControl, HandsFreeSettings
        from benchlab.services.station import LabelPattern
        from benchlab.sweep.session import check_name

        try:
            labels = LabelPattern.parse(self._q("#label", Input).value)
            # the same Lot field as the Characterize loop (it was the lot the app was started with)
            lot = check_name("lot name", self._q("#lot", Input).value.strip())
            settings = HandsFreeSettings(settle_s=self._quantity("hf-settle", "s", 1.0), poll_s=0.1,
                                         handling_s=self._quantity("hf-handling", "s", None))
            window = self._window()
        except BenchlabError as exc:
            self.show_error(exc)
            return
        self.hands_free_on = True
        self._hf_control = HandsFreeControl()
        tag = self._start_tag("hf-plot")
        self._hands_free_worker(tag, labels, lot, window, settings, self._hf_control)

    @work(thread=True, group="sweep")
    def _hands_free_worker(self, tag, labels, lot, window, settings, control) -> None:
        from benchlab.services.handsfree import hands_free

        def news(text="", verdict=None, note="", question=False):
            if text.startswith("sweeping"):
                self.feed.push(tag, NewCurve())  # in line with the points: the next ones are the new part's
            self.post_message(HandsFreeNews(tag, text, verdict, note, question))

        self._on_bench(tag, lambda: hands_free(
            self.handle, self.plan, window, labels, lot=lot,
            sessions_root=self.options.sessions, library=self.options.library, settings=settings,
            cancel=self.cancel_event, on_event=self.feed.sink(tag),
            on_status=lambda text: news(text), on_verdict=lambda v, n: news("", v, n),
            operator=self.options.operator, control=control,
            on_question=lambda text: news(text, question=True)) and None)

    def _answer_no_part(self, answer: str) -> None:
        control = getattr(self, "_hf_control", None)
        if not self.hands_free_on or control is None or not control.answer(answer):
            self.say("no question to answer: hands-free asks when no part shows up for the handling time")

    def action_hf_sweep_anyway(self) -> None:
        from benchlab.services.handsfree import SWEEP_ANYWAY

        self._answer_no_part(SWEEP_ANYWAY)

    def action_hf_mark_open(self) -> None:
        from benchlab.services.handsfree import MARK_OPEN

        self._answer_no_part(MARK_OPEN)

    @_quiet
    def on_hands_free_news(self, message: HandsFreeNews) -> None:
        if message.tag != self.shown_tag:
            return
        view = self._q(HandsFreeView)
        if message.question:
            view.big("NO PART SEEN: an empty fixture, or an open part?", "other")
            view.query_one("#hf-status").update(escape(message.text) + "\n[b]y[/b] sweep it anyway (an open part is "
                                                "classified open)   [b]b[/b] mark it open, next label   or seat a part")
            self._hf_asked = True
            return
        if message.text:
            view.query_one("#hf-status").update(escape(message.text))
            if getattr(self, "_hf_asked", False):  # answered, or a part turned up: the question is gone
                self._hf_asked = False
                view.big("", "")
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

