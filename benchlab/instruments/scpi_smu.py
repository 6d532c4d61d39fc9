"""The SCPI source-measure unit role, :class:`ScpiSmu` (implements ``roles.SourceMeasureUnit``).

Same plumbing as :mod:`benchlab.instruments.scpi_roles` (error-queue reads, repeats, the pipelined error check);
this module adds the SMU's source modes, compliance, readings and list sweeps.
"""

from __future__ import annotations

from typing import Sequence

from benchlab.errors import InputError, InstrumentError, InstrumentReportedError, InstrumentTimeout
from benchlab.instruments.profiles import Profile
from benchlab.instruments.scpi import chain, parse_bool, parse_error_reply, parse_readings, split_replies
from benchlab.instruments.scpi_roles import ScpiInstrument, _OutputMixin
from benchlab.instruments.transport import Transport
from benchlab.kinds import SourceFunction

# Time of one power-line cycle at 50 Hz (the slower mains), for list-sweep waits.
_PLC_SECONDS = 0.02


class ScpiSmu(_OutputMixin, ScpiInstrument):
    """A source-measure unit driven by a ``smu`` profile (implements ``roles.SourceMeasureUnit``)."""

    role = "smu"

    def __init__(self, transport: Transport, profile: Profile, *, identity: str = ""):
        super().__init__(transport, profile, identity=identity)
        self.mode: str | None = None  # "voltage" or "current" once configured
        self.nplc = 1.0

    def configure_source(self, mode: str, compliance: float) -> None:
        """Force ``mode`` (``"voltage"``: compliance in A; ``"current"``: compliance in V)."""
        for operation, values in self._source_steps(mode, compliance):
            self.configure(operation, **values)
        self.mode = mode

    @staticmethod
    def _source_steps(mode: str, compliance: float) -> list[tuple[str, dict[str, float]]]:
        """The settings that force ``mode`` with ``compliance``, the limit first: whatever happens next, the
        protection for the new mode is already in place."""
        if mode not in ("voltage", "current"):
            raise InputError(f"source mode must be 'voltage' or 'current', got {mode!r}")
        limit_unit = "amps" if mode == SourceFunction.VOLTAGE else "volts"
        limit_of = "current" if mode == SourceFunction.VOLTAGE else "voltage"
        return [(f"set_{limit_of}_compliance", {limit_unit: float(compliance)}), (f"source_{mode}", {})]

    def prepare_source(self, mode: str, compliance: float, nplc: float | None = None) -> None:
        """:meth:`configure_source`, :meth:`set_nplc` (when ``nplc`` is given) and a level of 0 as one batch.

        The compliance comes first. On a pipelining profile the batch is one compound message ending in the
        error query (one round trip, :meth:`~ScpiInstrument.configure_batch`); else each setting is sent and
        checked in turn, the same lines as the separate calls. The output must be off: nothing here powers it.
        """
        steps = self._source_steps(mode, compliance)
        level_unit = "volts" if mode == SourceFunction.VOLTAGE else "amps"
        if nplc is not None:
            steps.append(("set_nplc", {"nplc": float(nplc)}))
        steps.append((f"set_{mode}_level", {level_unit: 0.0}))
        self.configure_batch(steps)
        self.mode = mode
        if nplc is not None:
            self.nplc = float(nplc)

    def _require_mode(self) -> str:
        if self.mode is None:
            raise InstrumentError("configure_source() must be called before setting a level",
                                  resource=self.resource)
        return self.mode

    def set_level(self, value: float) -> None:
        """Set the forced level (V or A, by the configured mode)."""
        mode = self._require_mode()
        unit = "volts" if mode == SourceFunction.VOLTAGE else "amps"
        # on a pipelining profile the level's check rides on the next query (the reading)
        self.configure(f"set_{mode}_level", defer=True, **{unit: float(value)})

    def set_nplc(self, nplc: float) -> None:
        """Set the integration time in power-line cycles."""
        self.configure("set_nplc", nplc=float(nplc))
        self.nplc = float(nplc)

    def measure(self) -> tuple[float, float]:
        """One reading: (volts, amps).

        On a pipelining profile the compliance query goes in the same message as the reading (one round trip;
        :meth:`in_compliance` then answers from it).
        """
        self._tripped = None
        tripped_query = self.profile.lines(f"{self._limit_of()}_compliance_tripped") if self.mode else []
        read_lines = self.profile.lines("read")
        if not (self.pipelined and len(tripped_query) == 1 and len(read_lines) == 1):
            def parse(reply: str) -> tuple[float, float]:
                try:
                    return self._parse(reply, expect_points=1)[0]
                except InstrumentError as exc:
                    raise ValueError(str(exc)) from None

            return self.ask_parsed("read", parse)

        def parse_both(reply: str) -> tuple[tuple[float, float], bool]:
            parts = split_replies(reply)
            if len(parts) != 2:
                raise ValueError(f"expected a reading and a status, got {reply[:80]!r}")
            try:
                return self._parse(parts[0], expect_points=1)[0], self._tripped_from(parts[1])
            except InstrumentError as exc:  # (an unreadable status raises ValueError itself)
                raise ValueError(str(exc)) from None

        reading, self._tripped = self.ask_parsed("read", parse_both, [chain(read_lines + tripped_query)])
        return reading

    def _limit_of(self) -> str:
        return "current" if self._require_mode() == "voltage" else "voltage"

    def in_compliance(self) -> bool:
        """True when the last reading hit the compliance limit.

        With a ``reading.<limit>_compliance_bit`` in the profile the query answers a status register
        (e.g. SCPI-1999 ``STATus:QUEStionable:CONDition?``) and that bit is tested; else it answers 0/1.
        """
        tripped, self._tripped = getattr(self, "_tripped", None), None
        if tripped is not None:  # asked with the last reading (pipelining profile)
            return tripped
        return self.ask_parsed(f"{self._limit_of()}_compliance_tripped", self._tripped_from)

    def _tripped_from(self, reply: str) -> bool:
        """The compliance bit (or 0/1 state) in a ``*_compliance_tripped`` reply; ValueError when unreadable."""
        bit = self.profile.compliance_bits.get(self._limit_of())
        if bit is None:
            return parse_bool(reply)
        return bool(int(float(reply)) >> bit & 1)

    def compliance(self) -> float:
        """The compliance the instrument holds for the configured mode (needs the ``get_`` query)."""
        limit_of = "current" if self._require_mode() == "voltage" else "voltage"
        return self.ask_float(f"get_{limit_of}_compliance")

    def run_list(self, levels: Sequence[float], dwell_s: float) -> list[tuple[float, float]]:
        """Upload ``levels``, run them once, read the buffer back in one transfer.

        The output must already be on (the caller switches it); this method never does. The
        source is put back in fixed mode at the end, where it holds the last level given to
        :meth:`set_level`.

        Returns
        -------
        list of (float, float)
            (volts, amps) per level, in order.
        """
        mode = self._require_mode()
        settings = self.profile.list_settings
        if not levels:
            raise InputError("a list sweep needs at least one level")
        if len(levels) > settings["max_points"]:
            raise InputError(f"a list of {len(levels)} points is longer than the instrument takes "
                             f"({settings['max_points']}, profile '{self.profile.name}')")
        self._tripped = None
        values = settings["separator"].join(format(float(level), settings["value_format"]) for level in levels)
        setup = [line for operation, extra in (("clear_buffer", {}), (f"upload_{mode}", {"values": values}),
                                               ("dwell", {"seconds": float(dwell_s)}), (f"list_mode_{mode}", {}))
                 if operation in self.profile.list_commands  # clear_buffer is optional
                 for line in self.profile.list_lines(operation, **extra)]
        # Wait for the list to finish: its own duration, doubled for margin, on top of the usual timeout.
        expected_s = len(levels) * (float(dwell_s) + self.nplc * _PLC_SECONDS * 2)
        timeout_ms = int(getattr(self.transport, "timeout_ms", 2000) + 2000 * expected_s)
        if self.pipelined:
            return self._run_list_chained(setup, mode, len(levels), timeout_ms)
        for line in setup:
            self.send(line)
        for line in self.profile.list_lines("start"):
            self.send(line, idempotent=False)
        self.ask("wait", timeout_ms=timeout_ms)
        (*setup, fetch) = self.profile.list_lines("fetch")
        for line in setup:
            self.send(line)
        reply = self.transport.query(fetch, timeout_ms=timeout_ms)
        for line in self.profile.list_lines(f"fixed_mode_{mode}"):
            self.send(line)
        return self._parse(reply, expect_points=len(levels))

    def _run_list_chained(self, setup: list[str], mode: str, points: int, timeout_ms: int) -> list[tuple[float, float]]:
        """A pipelining profile's list run: the settings and their error query in one message, then start,
        wait, fetch, back to fixed mode and the error query in one more: two round trips per list. The first
        must pass before the second goes out: a refused upload would otherwise start the list held before."""
        self.send_batch(setup)
        start = self.profile.list_lines("start")
        run = [*start, *self.profile.lines("wait"), *self.profile.list_lines("fetch"),
               *self.profile.list_lines(f"fixed_mode_{mode}"), *self.profile.lines("error_query")]
        try:
            reply = self.transport.query(chain(run), idempotent=False, timeout_ms=timeout_ms)
        except InstrumentTimeout:
            self.check_errors(chain(start))  # a command error drops the rest of the message: say which
            raise
        parts = split_replies(reply)
        try:
            if len(parts) != 3:
                raise ValueError(reply)
            code, text = parse_error_reply(parts[2])
        except ValueError:
            raise InstrumentError(f"unexpected reply {reply[:80]!r} to the list run", resource=self.resource) from None
        if code != 0:
            more = self.read_error_queue()
            raise InstrumentReportedError(code, text + (f" (and {len(more)} more queued error(s))" if more else ""),
                                          command=chain(start), resource=self.resource)
        return self._parse(parts[1], expect_points=points)

    def _parse(self, reply: str, *, expect_points: int) -> list[tuple[float, float]]:
        fields = self.profile.reading_fields
        try:
            values = parse_readings(reply, self.profile.list_settings.get("separator", ","))
        except ValueError:
            raise InstrumentError(f"unexpected reading reply {reply[:80]!r}", resource=self.resource) from None
        if len(values) != expect_points * len(fields):
            raise InstrumentError(f"expected {expect_points} reading(s) of {len(fields)} values, got "
                                  f"{len(values)} values", resource=self.resource)
        at_volts, at_amps = fields.index("volts"), fields.index("amps")
        width = len(fields)
        return [(values[k * width + at_volts], values[k * width + at_amps]) for k in range(expect_points)]
