"""Bench, Characterize and Hands-free views: layout and display only (the app runs the actions)."""

from __future__ import annotations

from rich.markup import escape
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.widgets import Input, Label, Static

from benchlab.tui.plot import CurvePlot
from benchlab.units import format_si


def _field(label: str, input_id: str, value: str = "", placeholder: str = "") -> ComposeResult:
    yield Label(label, classes="field-label")
    yield Input(value=value, placeholder=placeholder, id=input_id, classes="field", name=label)  # name: in errors


class BenchView(Vertical):
    """The instruments, the fixture and the limits in force."""

    def compose(self) -> ComposeResult:
        yield Static("Not connected. Press s for the built-in simulator, c to connect the bench file.",
                     id="bench-info", classes="panel")

    def show(self, summary: dict | None, plan=None) -> None:
        if summary is None:
            self.query_one("#bench-info", Static).update(
                "Not connected. Press s for the built-in simulator, c to connect the bench file.")
            return
        lines = [f"[b]Bench[/b]  {'simulated (invented parts)' if summary['simulated'] else 'from bench file'}",
                 f"fixture      {summary['fixture']}"]
        if summary["fixture"] == "resistor" and summary["series_resistor_ohm"] is not None:
            tol = summary.get("series_resistor_tolerance") or 0.0
            lines.append(f"resistor     {summary['series_resistor_ohm']:.3f} ohm (measured), tolerance "
                         f"{tol * 100:.2g} %")
        lim = summary["limits"]
        lines.append(f"limits       {format_si(lim['max_supply_v'], 'V')}  {format_si(lim['max_drain_a'], 'A')}  "
                     f"{format_si(lim['max_power_w'], 'W')}")
        if plan is not None:
            lines.append(f"sweep        {plan.mode}, {plan.points} points, {format_si(plan.min_current_a, 'A')} to "
                         f"{format_si(plan.max_current_a, 'A')}")
        lines.append("")
        lines.append("[b]Instruments[/b]")
        for inst in summary["instruments"]:
            lines.append(f"{inst['role']:<7} {inst['resource']}")
            lines.append(f"        {inst['identity']}")
        self.query_one("#bench-info", Static).update("\n".join(lines))


class CharacterizeView(Horizontal):
    """The loop: settings and window on the left, the live curve, the verdict on the right."""

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="char-form", classes="form"):
            yield from _field("Lot", "lot", "lot-1")
            yield from _field("Next label", "label", "Q01")
            yield Label("Acceptance window", classes="section")
            yield from _field("Vth min (V)", "vth-min", "", "none")
            yield from _field("Vth max (V)", "vth-max", "", "none")
            yield from _field("KP min (A/V^2)", "kp-min", "", "none")
            yield from _field("Leakage max (A)", "leak-max", "", "none")
            yield from _field("Hysteresis max (V)", "hyst-max", "", "none")
            yield from _field("Reject reason", "reason", "", "why, for x")
        with Vertical(id="char-centre"):
            yield CurvePlot(id="char-plot")
            yield Static("", id="char-live", classes="live")
        yield Static("Put a part in the fixture and press r.", id="char-result", classes="panel result")

    def live(self, count: int, elapsed_s: float, power_w: float | None, peak_w: float | None, heating=None) -> None:
        """Point count, time, the part's power and its estimated temperature rise (``heating``: its Rth)."""
        lines = [f"points {count}   elapsed {elapsed_s:.1f} s"]
        if power_w is not None and peak_w is not None:
            lines[0] += f"   part power {format_si(power_w, 'W')}, peak {format_si(peak_w, 'W')}"
        if heating is None or power_w is None or peak_w is None:
            lines.append("temperature rise: not known (no Rth)")
        else:
            caution = "  [b reverse] CAUTION: may be hot to touch [/]" if heating.hot(peak_w) else ""
            lines.append(f"temperature rise (P x Rth) {_kelvin(heating.rise_k(power_w))} now, "
                         f"{_kelvin(heating.rise_k(peak_w))} at the peak{caution}")
            lines.append(escape(heating.describe()))
        self.query_one("#char-live", Static).update("\n".join(lines), layout=False)  # fixed height: no layout


def _kelvin(rise: float) -> str:
    return f"{rise:.2f} K" if rise < 10 else f"{rise:.0f} K"


class HandsFreeView(Vertical):
    """Probe, wait for a part, sweep it, show the verdict large, wait for it to be taken out."""

    def compose(self) -> ComposeResult:
        with Horizontal(id="hf-top"):
            with Vertical(classes="form narrow"):
                yield from _field("Settle time (s)", "hf-settle", "1.0")
            with Vertical(classes="form narrow"):
                yield from _field("Handling time (s)", "hf-handling", "5", "never ask")
            yield Static("Hands-free is off. Press h to start: the source probes the fixture at a few volts with "
                         "a 1 mA limit; seat a part and its sweep starts by itself.", id="hf-status", classes="panel")
        yield Static("", id="hf-big", classes="big")
        with Horizontal(id="hf-bottom"):
            yield CurvePlot(id="hf-plot")
            yield Static("", id="hf-log", classes="panel")

    def big(self, text: str, kind: str) -> None:
        big = self.query_one("#hf-big", Static)
        big.set_classes(f"big {kind}")
        big.update(text)
