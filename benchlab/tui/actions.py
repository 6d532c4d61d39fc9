"""Library, Sets and Sink actions of the app (a mixin): read the form, call the services, show the result."""

from __future__ import annotations

from pathlib import Path

from rich.markup import escape
from textual.widgets import DataTable, Input, Static

from benchlab.errors import BenchlabError, InputError
from benchlab.names import printable

SORT_KEYS = ("label", "lot", "state", "vth", "kp", "theta", "vgs_250u", "gm")


def _num(value, fmt: str) -> str:
    return "-" if value is None else format(value, fmt)


class DesignActions:
    """Mixed into the app: everything here calls ``services.station`` / ``services.design`` / ``services.library``."""

    sort_index = 0
    sets_found: list = []
    last_design = None
    exports = 0

    def _value(self, input_id: str) -> str:
        return self._q(f"#{input_id}", Input).value.strip()

    def _field_name(self, input_id: str) -> str:
        return self._q(f"#{input_id}", Input).name or input_id

    def _quantity(self, input_id: str, unit: str, default=None):
        """The number typed in a field, in SI ``unit`` (``default`` when empty); InputError naming the field."""
        from benchlab.units import parse_quantity

        text = self._value(input_id)
        try:
            return parse_quantity(text, unit) if text else default
        except ValueError as exc:
            raise InputError(f"{self._field_name(input_id)}: {exc}") from None

    def _whole(self, input_id: str, default: int) -> int:
        """A whole number typed in a field (``default`` when empty); InputError naming the field."""
        from benchlab.names import printable

        text = self._value(input_id)
        if not text:
            return default
        if not (text.isascii() and text.isdigit() and len(text) <= 6):
            raise InputError(f"{self._field_name(input_id)}: a whole number is expected, got '{printable(text, 40)}'")
        return int(text)

    def _lot(self, input_id: str) -> str | None:
        """A lot name typed in a field (None when empty: all lots); InputError for a name outside the rule."""
        from benchlab.names import check_name

        text = self._value(input_id)
        return check_name("lot name", text) if text else None

    # ----------------------------------------------------------------------------------- library
    def action_refresh_library(self) -> None:
        from benchlab.services import station

        table = self._q("#lib-table", DataTable)
        try:
            gm_at = self._quantity("lib-gm-at", "A", 0.02)
            rows = station.library_rows(self.options.library, text=self._value("lib-filter"), gm_at_a=gm_at,
                                        sort_key=SORT_KEYS[self.sort_index])
        except BenchlabError as exc:
            self.show_error(exc)
            return
        table.clear()
        for row in rows:
            table.add_row(row["lot"], row["label"], row["state"], _num(row["vth"], ".3f"), _num(row["kp"], ".4g"),
                          _num(row["theta"], ".3g"), _num(row["vgs_250u"], ".3f"), _num(row["gm"], ".4g"),
                          row["flags"] or row["classification"], key=row["spec"])
        self._show_bins()
        self.say(f"library: {len(rows)} parts, sorted by {SORT_KEYS[self.sort_index]}")

    def action_sort_library(self) -> None:
        self.sort_index = (self.sort_index + 1) % len(SORT_KEYS)
        self.action_refresh_library()

    def _show_bins(self) -> None:
        from benchlab.design.text import format_bins
        from benchlab.services.design import bin_parts
        from benchlab.services.station import DEFAULT_BIN_CURRENT_A, DEFAULT_BIN_WIDTH_V

        box = self._q("#lib-bins", Static)
        lot = self._q("#lot", Input).value.strip() or None
        try:
            bins, _ = bin_parts(self.options.library, DEFAULT_BIN_CURRENT_A, DEFAULT_BIN_WIDTH_V, lot=lot)
            box.update(f"VGS bins of lot {lot}: " + " ".join(
                f"{b.low:.2f}-{b.high:.2f} V: {b.count}" for b in bins if b.count))
        except BenchlabError as exc:
            box.update(escape(f"VGS bins of lot {lot}: {exc}"))

    def show_part(self, spec: str) -> None:
        from benchlab.services import station

        try:
            curve = station.part_curve(self.options.library, spec)
        except BenchlabError as exc:
            self.show_error(exc)
            return
        plot = self._q("#lib-plot")
        plot.title = spec
        plot.set_points(curve["vgs"], curve["id"])
        plot.set_fit(curve["fit_vgs"], curve["fit_id"])
        resid = self._q("#lib-resid")
        rms = curve["rms_relative_residual"]
        resid.title = "residual of the fit" + (f", rms {rms * 100:.2f} %" if rms is not None else ": no fit")
        resid.set_points(curve["residual_vgs"], curve["residual_pct"])
        part = curve["part"]
        params = part.params
        lines = [f"[b]{escape(spec)}[/]  state {part.state}" + (escape(f" ({part.reason})") if part.reason else ""),
                 f"class {part.classification or '-'}   flags {', '.join(part.flags) or 'none'}"]
        if params is not None:
            err = part.stderr or {}
            lines.append(f"model {params.model}  Vth {params.vth:.4f} V" +
                         (f" +/- {err['vth'] * 1e3:.1f} mV" if err.get("vth") else ""))
            lines.append(f"KP {params.kp:.4g} A/V^2  THETA {params.theta:.3g} 1/V")
        if curve["rms_relative_residual"] is not None:
            lines.append(f"fit residual (rms, measured / fitted - 1) {curve['rms_relative_residual'] * 100:.2f} %"
                         + (f"; {curve['outside_window']} points outside the fitted range" if curve["outside_window"]
                            else ""))
        self._q("#lib-part", Static).update("\n".join(lines))

    # ----------------------------------------------------------------------------------- sets
    def action_find_sets(self) -> None:
        from benchlab.services.design import match_parts

        table = self._q("#sets-table", DataTable)
        try:
            current = self._quantity("sets-current", "A")
            size = self._whole("sets-size", 2)
            result = match_parts(self.options.library, current, size, current_max=self._quantity("sets-current-max", "A"),
                                 lot=self._lot("sets-lot"), count=10)
        except (BenchlabError, ValueError, TypeError) as exc:
            self.show_error(exc)
            return
        table.clear()
        self.sets_found = list(result.sets)
        for n, found in enumerate(result.sets, start=1):
            table.add_row(str(n), " + ".join((found.ref,) + tuple(found.outputs)),
                          f"{found.worst_error * 100:.2f} %", f"{self._value('sets-current')} A", key=str(n - 1))
        self._q("#sets-info", Static).update(
            f"{len(result.sets)} set(s) of {size}; worst mismatch is the largest output current error against the "
            f"reference over the current range. Select a row and press v to reserve it.")

    def action_reserve_set(self) -> None:
        from benchlab.services.design import reserve_set

        table = self._q("#sets-table", DataTable)
        if not self.sets_found or table.cursor_row is None or table.cursor_row >= len(self.sets_found):
            self.say("find sets first (m), then pick one")
            return
        chosen = self.sets_found[table.cursor_row]
        try:
            # one design, all parts or none: on a shared library another engineer may have taken one since
            design_id = reserve_set(self.options.library, chosen, operator=self.options.operator or None)
        except BenchlabError as exc:
            self.action_find_sets()  # the search runs again on what is left; the refusal stays on screen
            self.show_error(f"{exc}; the sets shown are searched again on what is left")
            return
        self.say(f"reserved {' + '.join((chosen.ref,) + tuple(chosen.outputs))} as design {design_id}")
        self.action_find_sets()

    # ----------------------------------------------------------------------------------- sink
    def _sink_request(self, save: bool = False):
        from benchlab.design.sink import SinkOptions
        from benchlab.services.design import SinkRequest

        current = self._quantity("sink-current", "A")
        resistor = self._quantity("sink-resistor", "ohm")
        if resistor is not None:
            current = None
        options = SinkOptions(series=(self._value("sink-series") or "E24").upper(),
                              load_voltage=self._quantity("sink-load", "V"),
                              source_resistor_ohm=self._quantity("sink-degeneration", "ohm", 0.0),
                              mismatch_target=self._quantity("sink-mismatch", "%"))
        return SinkRequest(supply=self._quantity("sink-supply", "V"), current=current, resistor=resistor,
                           outputs=self._whole("sink-outputs", 1), lot=self._lot("sink-lot"),
                           options=options, save=save)

    def recompute_sink(self, save: bool = False) -> None:
        from benchlab.design.text import format_sink_report
        from benchlab.services.design import design_sink

        report = self._q("#sink-report", Static)
        try:
            design, design_id = design_sink(self._sink_request(save), self.options.library)
        except (BenchlabError, ValueError, TypeError) as exc:
            self.last_design = None
            report.update(f"[b red]Cannot design this:[/] {escape(printable(str(exc), 300))}")
            return
        self.last_design = design
        report.update(escape(format_sink_report(design, design_id)))
        if save:
            self.say(f"design saved as #{design_id}; its parts are reserved")

    def action_save_design(self) -> None:
        self.recompute_sink(save=True)

    def action_export_netlist(self) -> None:
        from benchlab.services.design import sink_netlist_text, write_text

        if self.last_design is None:
            self.say("no design to export: fill in the Sink form first")
            return
        self.exports += 1
        path = Path(self.options.sessions).parent / f"sink-{self.exports}.cir"
        try:
            write_text(str(path), sink_netlist_text(self.last_design))
        except BenchlabError as exc:
            self.show_error(exc)
            return
        self.say(f"netlist written to {path}")
