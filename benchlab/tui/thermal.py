"""The Thermal view (F7): threshold tempco, mobility exponent and ZTC point, Rth with the pulsed/DC cross-check.

Layout (:class:`ThermalView`) and its actions (:class:`ThermalActions`, mixed into the app). A run goes through
``services/thermal.py`` on the app's open bench in a ``@work(thread=True)`` worker and uses the app's sweep
machinery: a tag from ``_start_tag``, ``_on_bench`` (output off, then ``SweepFinished``), the abort key's cancel
event. Progress (every fixture reading, setpoint and Rth reading, the tempco sweep's points) comes back as
:class:`ThermalNews` through ``post_message``, dropped once the run is no longer shown (after an abort).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import Any

from rich.markup import escape
from textual import work
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.message import Message
from textual.widgets import DataTable, Input, Label, Static

from benchlab.errors import BenchlabError
from benchlab.tui.messages import _quiet
from benchlab.tui.plot import CurvePlot
from benchlab.tui.views_bench import _field

KELVIN = 273.15
CAUTION = ("[b]Caution:[/b] the heated block and the part get hot enough to burn (up to the bench's thermal "
           "limits, which are what benchlab never exceeds, not what is safe to touch). Let both cool before "
           "handling; keep the block clear of anything flammable.")
READY = ("Part in the heated fixture: p sweeps it at each temperature (tempco, mobility exponent, ZTC point); "
         "f measures its thermal resistance by the electrical method, with the pulsed vs DC cross-check.")


class ThermalNews(Message):
    """Progress of the thermal run tagged ``tag``: a line of its record (``kind``, ``values``), a message
    (``kind == "say"``) or a measured sweep point (``kind == "point"``)."""

    def __init__(self, tag: int, kind: str, values: Any):
        super().__init__()
        self.tag = tag
        self.kind = kind
        self.values = values


class ThermalView(Horizontal):
    """The part and settings on the left, progress and the tempco sweep in the middle, the results on the right."""

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="th-form", classes="form"):
            yield from _field("Part label", "th-part", "", "the part in the fixture (LOT/LABEL when the label is in several lots)")
            yield from _field("Temperatures (degC)", "th-temps", "25,60")
            yield from _field("Heat sink (K/W)", "th-heatsink", "0")
            yield from _field("Heating power (W)", "th-power", "", "bench limit")
            yield Static(CAUTION, id="th-caution", classes="caution")
        with Vertical(id="th-centre"):
            yield Static(READY, id="th-live", classes="panel short")
            yield CurvePlot(title="tempco sweeps", id="th-plot")
        with Vertical(id="th-right", classes="result"):
            yield Static("No thermal run yet.", id="th-result", classes="panel")
            yield Static("", id="th-values")


class ThermalActions:
    """Mixed into :class:`benchlab.tui.app.BenchlabApp` (uses its ``_start_tag``, ``_on_bench``, ``cancel_event``)."""

    thermal_tag: int | None = None  # the running (or last) thermal run's tag

    def thermal_shown(self) -> None:
        """The view came up: offer the part highlighted in the Library (else the part about to be swept)."""
        field = self._q("#th-part", Input)
        if field.value.strip():
            return
        table = self._q("#lib-table", DataTable)
        label = ""
        if table.row_count:
            try:
                # the row's LOT/LABEL: a label can be in several lots, and the values are stored on this one
                label = str(table.coordinate_to_cell_key(table.cursor_coordinate).row_key.value)
            except Exception:  # noqa: BLE001 - no highlighted row
                label = ""
        field.value = label or self._q("#label", Input).value.strip()
        self._show_library_values(field.value.strip())

    def _thermal_inputs(self) -> dict[str, Any]:
        from benchlab.sweep.session import check_name
        from benchlab.units import parse_quantity

        def number(input_id: str, unit: str, default: float | None):
            text = self._q(f"#{input_id}", Input).value.strip()
            return parse_quantity(text, unit) if text else default

        text = self._q("#th-part", Input).value.strip()
        lot, _, label = text.rpartition("/")
        part = check_name("part label", label)
        lot = check_name("lot name", lot) if lot else None
        temps = [parse_quantity(t, "degC") for t in self._q("#th-temps", Input).value.replace(";", ",").split(",")
                 if t.strip()]
        return {"part": part, "lot": lot, "temps": temps, "heatsink": number("th-heatsink", "K/W", 0.0),
                "power": number("th-power", "W", None)}

    def action_thermal_tempco(self) -> None:
        self._thermal_start("tempco")

    def action_thermal_rth(self) -> None:
        self._thermal_start("rth")

    def _thermal_start(self, measurement: str) -> None:
        if not self._bench_ready():
            return
        try:
            inputs = self._thermal_inputs()
        except (BenchlabError, ValueError) as exc:
            self.show_error(exc)
            return
        tag = self._start_tag("th-plot")
        self.thermal_tag = tag
        self._thermal_lines = {"fixture": "", "step": "", "reading": ""}
        self._thermal_setpoint = None
        what = "sweeps at " + ", ".join(f"{t:g}" for t in inputs["temps"]) + " degC" if measurement == "tempco" \
            else "thermal resistance (heat, then sense)"
        self._q("#th-result", Static).update(escape(f"{inputs['part']}: {what}... (Ctrl+K aborts)"))
        self.say(f"thermal {measurement} of {inputs['part']} started: the fixture heats")
        self._thermal_worker(tag, measurement, inputs)

    @work(thread=True, group="sweep")
    def _thermal_worker(self, tag: int, measurement: str, inputs: dict) -> None:
        from benchlab.services import thermal as svc
        from benchlab.sweep.records import PointMeasured
        from benchlab.sweep.thermal_plan import RthPlan

        def news(kind, values):
            self.post_message(ThermalNews(tag, kind, values))

        def on_event(event):
            if isinstance(event, PointMeasured):
                news("point", (event.point.vgs, event.point.id))

        common = {"handle": self.handle, "seat": False, "sessions_root": self.options.sessions,
                  "library": self.options.library, "lot": inputs["lot"], "say": lambda text: news("say", text), "cancel": self.cancel_event,
                  "on_record": news}
        if measurement == "tempco":
            job = lambda: svc.measure_tempco(inputs["part"], inputs["temps"], on_event=on_event,  # noqa: E731
                                             **common)
        else:
            plan = RthPlan(heatsink_k_per_w=inputs["heatsink"], heating_power_w=inputs["power"])
            job = lambda: svc.measure_rth(inputs["part"], plan=plan, **common)  # noqa: E731
        self._on_bench(tag, job)

    @_quiet
    def on_thermal_news(self, message: ThermalNews) -> None:
        if message.tag != self.shown_tag:
            return  # a late message of a run no longer shown (aborted): dropped
        kind, values = message.kind, message.values
        lines = self._thermal_lines
        if kind == "point":
            self._q("#th-plot").add_point(*values)
            return
        if kind == "say":
            lines["step"] = str(values)
        elif kind == "sensor":
            setpoint = getattr(self, "_thermal_setpoint", None)
            aim = f", setpoint {setpoint - KELVIN:.2f} degC" if setpoint else ""
            when = f" at {values['t_s']:.0f} s of settling" if "t_s" in values else ""
            when = " at the end of heating" if values.get("after_heating") else when
            lines["fixture"] = f"fixture {values['temperature_k'] - KELVIN:.2f} degC{aim}{when}"
        elif kind == "fixture_setpoint":
            self._thermal_setpoint = values["temperature_k"]
            lines["step"] = (f"fixture set back to {values['temperature_k'] - KELVIN:.2f} degC" if values.get("restored")
                             else f"fixture set to {values['temperature_k'] - KELVIN:.2f} degC: waiting for it to "
                                  "settle")
        elif kind == "reading":
            power = values["vgs"] * values["id"]
            lines["reading"] = (f"{values['what']}: VGS {values['vgs']:.4f} V at {values['id'] * 1e3:.4g} mA"
                                f" ({power:.3g} W)")
            if values["what"] == "heating":
                lines["step"] = "heating the part at a known power until VGS is steady"
        elif kind == "plan":
            lines["step"] = f"{values['measurement']} of {values['part']}; {values['settle']}"
        text = "\n".join(line for line in (lines["step"], lines["fixture"], lines["reading"]) if line)
        self._q("#th-live", Static).update(escape(text))

    def thermal_finished(self, message) -> None:
        """The run's ``SweepFinished`` (after its output is off): show the result or why it stopped."""
        from benchlab.services import thermal as svc

        outcome = message.verdict
        result = self._q("#th-result", Static)
        if message.error or outcome is None:
            why = message.error or "stopped"
            result.update(f"[b red]Stopped[/]: {escape(why)}\nThe output is off; a fixture the run had set was set "
                          "back to where it started.")
            self.show_error(why)
            return
        # the session folder by its name and the library part by its spec (the paths are in the Bench view)
        stored = outcome.stored.split(": part ", 1)[-1] if outcome.stored else ""
        lines = svc.format_outcome(replace(outcome, session_path=Path(outcome.session_path).name,
                                           stored=stored and f"stored on part {stored}"))
        flag = outcome.rth is not None and outcome.rth.pulsed_dc.get("flag")
        head = "[b white on red] CHECK PART [/]" if flag else "[b black on green]  DONE  [/]"
        result.update(head + "  " + escape("\n".join(lines)))
        shown = self._q("#th-part", Input).value.strip()  # LOT/LABEL when the lot was named
        self._show_library_values(shown if shown.rpartition("/")[2] == outcome.part else outcome.part)
        self.say(f"thermal {outcome.measurement} of {outcome.part} done; output off. "
                 + (outcome.stored and "Stored in the library." or "Not stored (part not in the library)."))

    def _show_library_values(self, part: str) -> None:
        """The values the design will use for ``part`` and where each comes from (measured or assumed)."""
        from benchlab.services import thermal as svc

        rows = svc.library_thermal(self.options.library, part) if part else []
        lines = [f"[b]{'design uses':<12} {'value':<24} source[/b]"] if rows else []
        for row in rows:
            value = svc.format_value(row["quantity"], row["value"], row["stderr"])
            lines.append(escape(f"{row['quantity']:<12} {value:<24} {row['source']}"))
        self._q("#th-values", Static).update("\n".join(lines))


__all__ = ["ThermalActions", "ThermalNews", "ThermalView"]
