"""Library, Sets and Sink views: layout and display only (the app runs the actions)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Horizontal, ScrollableContainer, Vertical, VerticalScroll
from textual.widgets import DataTable, Input, Label, Static

from benchlab.tui.plot import CurvePlot, ResidualPlot
from benchlab.tui.views_bench import _field

LIBRARY_COLUMNS = ("lot", "label", "state", "Vth (V)", "KP (A/V^2)", "THETA (1/V)", "VGS@250uA (V)", "gm (S)", "flags")


class LibraryView(Vertical):
    def compose(self) -> ComposeResult:
        with Horizontal(id="lib-top"):
            yield Label("Filter", classes="field-label")
            yield Input(placeholder="lot, label, state or flag", id="lib-filter", classes="field wide")
            yield Label("gm at (A)", classes="field-label")
            yield Input(value="0.02", id="lib-gm-at", classes="field", name="gm at (A)")
        with Horizontal(id="lib-body"):
            table = DataTable(id="lib-table", cursor_type="row", zebra_stripes=True)
            table.add_columns(*LIBRARY_COLUMNS)
            yield table
            with Vertical(id="lib-detail"):
                yield CurvePlot(title="selected part", id="lib-plot")
                yield ResidualPlot(id="lib-resid")
                yield Static("", id="lib-part", classes="panel")
        yield Static("", id="lib-bins", classes="panel short")


class SetsView(Horizontal):
    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="form"):
            yield from _field("Current (A)", "sets-current", "0.02")
            yield from _field("Up to current (A)", "sets-current-max", "", "one current")
            yield from _field("Set size", "sets-size", "2")
            yield from _field("Lot", "sets-lot", "", "all lots")
        with Vertical():
            table = DataTable(id="sets-table", cursor_type="row", zebra_stripes=True)
            table.add_columns("#", "parts", "worst mismatch", "at current")
            yield table
            yield Static("Press m to find the best matched sets among the in-stock parts.", id="sets-info",
                         classes="panel short")


class SinkView(Horizontal):
    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="form"):
            yield from _field("Supply (V)", "sink-supply", "24")
            yield from _field("Target current (A)", "sink-current", "0.02")
            yield from _field("or resistor (ohm)", "sink-resistor", "", "design it")
            yield from _field("Outputs", "sink-outputs", "1")
            yield from _field("Resistor series", "sink-series", "E24")
            yield from _field("Degeneration (ohm)", "sink-degeneration", "0")
            yield from _field("or mismatch target", "sink-mismatch", "", "e.g. 2 %")
            yield from _field("Load voltage (V)", "sink-load", "", "the supply")
            yield from _field("Lot", "sink-lot", "", "all lots")
        # the report is taller and wider than the panel (its cautions come last): it scrolls both ways, so every
        # caution can be read (they were cut off at the bottom and the right edge)
        with ScrollableContainer(id="sink-scroll", classes="panel"):
            yield Static("Fill in the form; the design is recomputed as you type.", id="sink-report")
