"""SCPI role classes: :class:`ScpiSupply`, :class:`ScpiMeter`, :class:`ScpiSmu`.

Each implements its interface in ``roles.py`` over an injected transport and a validated
:class:`~benchlab.instruments.profiles.Profile`. They hold no sweep logic and never send
anything the caller did not ask for: closing leaves outputs as they are; only the explicit
``safe_off()`` switches an output off. Every setting is followed by reading the instrument's
error queue until it is empty, so a refused command raises
:class:`~benchlab.errors.InstrumentReportedError` with the instrument's own code and text.
"""

from __future__ import annotations

from typing import Any, Callable, Sequence

from benchlab.errors import (BenchlabError, ConnectionLost, InputError, InstrumentError,
                             InstrumentReportedError, InstrumentTimeout)
from benchlab.instruments.profiles import Profile
from benchlab.instruments.scpi import chain, parse_bool, parse_error_reply, parse_reading, split_replies
from benchlab.instruments.transport import Transport

# A queue holds 16 entries in the simulator (more on some instruments); stop reading after this
# many so an instrument that never reports "0" cannot hang us.
MAX_ERROR_READS = 64
# Longest wait for *OPC? after *RST (common practice: resets finish within seconds).
_RESET_WAIT_MS = 10000
# Error codes that say "this time", not "never": a hardware or device-specific hiccup, or a query the
# instrument lost (SCPI-1999 vol. 2, ch. 21; IEEE 488.2 6.3.2). A setting or query that is safe to repeat
# is sent once more before such an error is raised; a command, data or execution error is raised at once.
TRANSIENT_ERROR_CODES = frozenset({-240, -300, -310, -410, -420})
NO_READING_CODE = -230  # data corrupt or stale: FETCh? with no reading taken (SCPI-1999 vol. 2, ch. 21)


class ScpiInstrument:
    """Shared plumbing: settings with error check, queries, identification.

    Parameters
    ----------
    transport : Transport
        An open transport (injected; the instrument never opens its own).
    profile : Profile
        The instrument's validated profile.
    identity : str
        The ``*IDN?`` reply when already known (set by :meth:`connect`).
    """

    role = ""

    def __init__(self, transport: Transport, profile: Profile, *, identity: str = ""):
        if profile.role != self.role:
            raise InputError(f"profile '{profile.name}' is for role {profile.role}, not {self.role}",
                             path=profile.source_path)
        self.transport = transport
        self.profile = profile
        self.identity = identity
        self.resource = getattr(transport, "resource", "")
        self.repeats = 0  # messages sent again after a transient error or an unreadable reply
        # a setting written without its error-queue read yet (profile pipeline_error_check): (text, reopen count);
        # its check rides on the next query, or is read before anything else is sent
        self._pending: tuple[str, int] | None = None

    @property
    def pipelined(self) -> bool:
        """True when the profile lets a setting's error check ride on the next query (``pipeline_error_check``)."""
        return bool(getattr(self.profile, "pipeline_error_check", False))

    # -- connection ----------------------------------------------------------------------
    def connect(self, *, reset: bool = False) -> str:
        """Identify the instrument, clear its status, optionally reset it; returns the identity.

        ``*RST`` puts an instrument in its default state (output off on a supply or SMU).
        """
        self.identity = self.ask("identify").strip()
        if not self.identity:
            raise InstrumentError("answered *IDN? with an empty reply", resource=self.resource)
        self.configure("clear_status")
        if reset:
            self.configure("reset")
            # A reset can take seconds on a real instrument; wait for it rather than time out.
            self.ask("wait", timeout_ms=max(int(getattr(self.transport, "timeout_ms", 0)), _RESET_WAIT_MS))
        return self.identity

    def close(self) -> None:
        """Close the connection without sending anything."""
        self.transport.close()

    # -- messages ------------------------------------------------------------------------
    def configure(self, operation: str, *, idempotent: bool = True, defer: bool = False, **values: Any) -> None:
        """Send the lines of a setting, checking the error queue after each one (the last one's check may be
        deferred, see :meth:`send`)."""
        lines = self.profile.lines(operation, **values)
        for k, line in enumerate(lines):
            self.send(line, idempotent=idempotent, defer=defer and k == len(lines) - 1)

    def configure_batch(self, steps: Sequence[tuple[str, dict[str, Any]]]) -> None:
        """Send several settings, ``(operation, values)`` in order, with one error-queue check for all of them.

        On a pipelining profile (``pipeline_error_check``: the instrument takes compound messages) every line goes
        in one message with the error query at its end: one round trip for the batch (:meth:`send_batch`). Else
        each line is sent and checked in turn, exactly as :meth:`configure` would. Put only settings that power
        nothing in a batch: an execution error leaves the later units of a compound message applied.
        """
        if not self.pipelined:
            for operation, values in steps:
                self.configure(operation, **values)
            return
        self.send_batch([line for operation, values in steps for line in self.profile.lines(operation, **values)])

    def send_batch(self, lines: Sequence[str]) -> None:
        """Send settings as one compound message ending in the error query (IEEE 488.2: program message units
        joined by ``;``); raise the first error queued.

        A command error (-1xx) makes the instrument drop the rest of the message, the error query with it (IEEE
        488.2; docs/scpi.md): the query then times out and the queue is read, so that error is the one raised. The lines
        must be settings that are safe to send twice: a lost, garbled or passing (-240, -300, ...) answer sends
        the whole batch once more, checked.

        Raises
        ------
        InstrumentReportedError
            With the instrument's code and text; ``command`` is the whole batch.
        """
        self.confirm()
        (error_query,) = self.profile.lines("error_query")
        batch = chain(lines)
        for attempt in (1, 2):
            retries = getattr(self.transport, "retry_count", 0)
            reply = self._query_or_its_error(chain([*lines, error_query]), batch, True, None)
            try:
                code, text = parse_error_reply(reply)
            except ValueError:
                code, text = None, f"unexpected reply {reply[:80]!r} to '{error_query}' after '{batch}'"
            if code == 0:
                if getattr(self.transport, "retry_count", 0) != retries:
                    self._drop_transient_errors(batch)  # the unanswered first try may have queued one
                return
            if code is not None:
                more = self.read_error_queue()
                if code not in TRANSIENT_ERROR_CODES or attempt == 2:
                    if more:
                        text += f" (and {len(more)} more queued error(s))"
                    raise InstrumentReportedError(code, text, command=batch, resource=self.resource)
            elif attempt == 2:
                raise InstrumentError(text, resource=self.resource)
            self.repeats += 1

    def send(self, command: str, *, idempotent: bool = True, defer: bool = False) -> None:
        """Write one message, then raise the first error the instrument queued for it.

        A connection reset right after a write only shows at the next I/O (here the error-queue
        read), and the instrument may never have seen the message; so when the link was reopened
        meanwhile, an idempotent setting is sent once more on the new link and anything else raises
        :class:`~benchlab.errors.ConnectionLost` rather than be taken as applied.

        With ``defer`` and a profile that pipelines (``pipeline_error_check``) an idempotent setting is only
        written: its error-queue query is chained to the next query (one round trip for both), or read by
        :meth:`confirm` before anything else is sent. A setting still unchecked is always checked first.
        """
        self.confirm()
        if defer and idempotent and self.pipelined:
            self.transport.write(command, idempotent=True)
            self._pending = (command, getattr(self.transport, "reopen_count", 0))
            return
        try:
            self._send_once(command, idempotent)
        except InstrumentReportedError as exc:
            if not (idempotent and exc.code in TRANSIENT_ERROR_CODES):
                raise
            self.repeats += 1
            self._send_once(command, idempotent)

    def _send_once(self, command: str, idempotent: bool) -> None:
        reopens = getattr(self.transport, "reopen_count", 0)
        self.transport.write(command, idempotent=idempotent)
        self.check_errors(command)
        if getattr(self.transport, "reopen_count", 0) == reopens:
            return
        if not idempotent:
            raise ConnectionLost(f"the connection was reopened after '{command}'; it may not have been applied",
                                 resource=self.resource)
        reopens = getattr(self.transport, "reopen_count", 0)
        self.transport.write(command, idempotent=idempotent)
        self.check_errors(command)
        if getattr(self.transport, "reopen_count", 0) != reopens:
            raise ConnectionLost(f"the connection dropped again while sending '{command}'", resource=self.resource)

    def confirm(self) -> None:
        """Read the error queue for a setting whose check was deferred (nothing when none is pending).

        Raises
        ------
        InstrumentReportedError
            The setting was refused (a transient error, or a link reopened since, sends it once more, checked).
        """
        if self._pending is None:
            return
        command, reopens = self._pending
        self._pending = None
        try:
            self.check_errors(command)
        except InstrumentReportedError as exc:
            if exc.code not in TRANSIENT_ERROR_CODES:
                raise
            self._send_again(command)
            return
        if getattr(self.transport, "reopen_count", 0) != reopens:
            self._send_again(command)

    def _send_again(self, command: str) -> None:
        """A deferred setting whose check failed for a passing reason, or was lost: once more, checked."""
        self.repeats += 1
        self.send(command)

    def check_errors(self, command: str | None = None) -> None:
        """Read the error queue until empty; raise the first entry found.

        Raises
        ------
        InstrumentReportedError
            With the instrument's code and text, and the command it followed.
        """
        errors = self.read_error_queue()
        if errors:
            code, text = errors[0]
            if len(errors) > 1:
                text += f" (and {len(errors) - 1} more queued error(s))"
            raise InstrumentReportedError(code, text, command=command, resource=self.resource)

    def read_error_queue(self) -> list[tuple[int, str]]:
        """Empty the instrument's error queue and return its entries, oldest first."""
        (query,) = self.profile.lines("error_query")
        errors: list[tuple[int, str]] = []
        for _ in range(MAX_ERROR_READS):
            reply = self.transport.query(query)
            try:
                code, text = parse_error_reply(reply)
            except ValueError:
                self.repeats += 1  # a garbled line: the entry it carried is lost, the next read is asked
                again = self.transport.query(query)
                try:
                    code, text = parse_error_reply(again)
                except ValueError:
                    raise InstrumentError(f"unexpected reply {again!r} to '{query}' (and {reply!r} before it)",
                                          resource=self.resource) from None
            if code == 0:
                return errors
            errors.append((code, text))
        return errors

    def ask(self, operation: str, *, idempotent: bool = True, timeout_ms: int | None = None,
            lines: list[str] | None = None) -> str:
        """Send a query operation and return the reply.

        An instrument that refuses a query queues an error and sends nothing, which looks like a
        timeout; the error queue is read then, so the user sees the instrument's code and text.
        ``lines`` replaces the profile's lines of ``operation`` (a compound query built from them).
        """
        try:
            return self._ask_once(operation, idempotent, timeout_ms, lines)
        except InstrumentReportedError as exc:
            if not (idempotent and exc.code in TRANSIENT_ERROR_CODES):
                raise
            self.repeats += 1
            return self._ask_once(operation, idempotent, timeout_ms, lines)

    def _ask_once(self, operation: str, idempotent: bool, timeout_ms: int | None,
                  lines: list[str] | None = None) -> str:
        lines = list(lines or self.profile.lines(operation))
        for line in lines[:-1]:
            self.send(line)
        if self._pending is not None:
            return self._ask_with_check(operation, lines[-1], idempotent, timeout_ms)
        retries = getattr(self.transport, "retry_count", 0)
        reply = self._query_or_its_error(lines[-1], lines[-1], idempotent, timeout_ms)
        if getattr(self.transport, "retry_count", 0) != retries:
            self._drop_transient_errors(lines[-1])  # the unanswered first try may have queued one
        return reply

    def _query_or_its_error(self, text: str, command: str, idempotent: bool, timeout_ms: int | None) -> str:
        """Send a query message; on a timeout raise the error the instrument queued instead (a refused query
        sends nothing), naming ``command``, or the timeout when the queue is empty."""
        try:
            return self.transport.query(text, idempotent=idempotent, timeout_ms=timeout_ms)
        except InstrumentTimeout as timeout:
            try:
                errors = self.read_error_queue()
            except BenchlabError:
                raise timeout from None
            if not errors:
                raise
            code, message = errors[0]
            raise InstrumentReportedError(code, message, command=command, resource=self.resource) from timeout

    def _ask_with_check(self, operation: str, query: str, idempotent: bool, timeout_ms: int | None) -> str:
        """The query with the deferred setting's error-queue query chained to it: one round trip for both."""
        command, reopens = self._pending
        self._pending = None
        (error_query,) = self.profile.lines("error_query")
        retries = getattr(self.transport, "retry_count", 0)
        reply = self._query_or_its_error(chain([query, error_query]), f"{command}; {query}", idempotent, timeout_ms)
        *answer, check = split_replies(reply)
        lost = (getattr(self.transport, "retry_count", 0) != retries
                or getattr(self.transport, "reopen_count", 0) != reopens or not answer)
        try:
            code, text = parse_error_reply(check)
        except ValueError:
            lost = True
        if not lost and code != 0:
            more = self.read_error_queue()
            if not (code in TRANSIENT_ERROR_CODES and idempotent):
                if more:
                    text += f" (and {len(more)} more queued error(s))"
                raise InstrumentReportedError(code, text, command=command, resource=self.resource)
            lost = True
        if lost:  # the check's answer was lost, unreadable or passing, or the link reopened: again, one by one
            self._send_again(command)
            return self._ask_once(operation, idempotent, timeout_ms, [query])
        return ";".join(answer)

    def _drop_transient_errors(self, command: str) -> None:
        """Read the queue after a query that had to be asked twice: transient errors (the lost first try's)
        are dropped, any other is raised."""
        for code, text in self.read_error_queue():
            if code not in TRANSIENT_ERROR_CODES:
                raise InstrumentReportedError(code, text, command=command, resource=self.resource)

    def ask_parsed(self, operation: str, parse: Callable[[str], Any], lines: list[str] | None = None) -> Any:
        """A query whose reply goes through ``parse``; an unreadable reply (a line garbled on the way) is
        asked once more before it is an error."""
        reply = self.ask(operation, lines=lines)
        try:
            return parse(reply)
        except ValueError:
            pass
        self.repeats += 1
        again = self.ask(operation, lines=lines)
        try:
            return parse(again)
        except ValueError:
            raise InstrumentError(f"unexpected reply {again!r} to {operation} (and {reply!r} before it)",
                                  resource=self.resource) from None

    def ask_float(self, operation: str) -> float:
        """A numeric query (SCPI special values -> inf/nan)."""
        return self.ask_parsed(operation, parse_reading)

    def ask_bool(self, operation: str) -> bool:
        """A 0/1 query."""
        return self.ask_parsed(operation, parse_bool)


class _OutputMixin:
    """Output on/off for the roles that have one."""

    def set_output(self, on: bool) -> None:
        """Switch the output on or off (exactly one operation, nothing else).

        Off goes out before the check of a deferred setting: an error that setting queued is then read by
        off's own check (and raised; the output is off by then).
        """
        if not on:
            self._pending = None  # type: ignore[attr-defined]
        self.configure("output_on" if on else "output_off")  # type: ignore[attr-defined]

    def output_is_on(self) -> bool:
        """Ask the instrument whether its output is on."""
        return self.ask_bool("output_state")  # type: ignore[attr-defined]

    def safe_off(self) -> None:
        """Switch the output off; the one explicit call that does so (used on every exit path)."""
        self.set_output(False)


class ScpiSupply(_OutputMixin, ScpiInstrument):
    """A one-channel DC supply driven by a ``supply`` profile (implements ``roles.Supply``)."""

    role = "supply"

    def set_current_limit(self, amps: float) -> None:
        """Set the current limit (A)."""
        self.configure("set_current_limit", amps=float(amps))

    def set_voltage(self, volts: float) -> None:
        """Set the voltage setpoint (V); on a pipelining profile its check rides on the next query."""
        self.configure("set_voltage", defer=True, volts=float(volts))

    def measure_voltage(self) -> float:
        """Output voltage readback (V)."""
        return self.ask_float("measure_voltage")

    def measure_current(self) -> float:
        """Output current readback (A)."""
        return self.ask_float("measure_current")

    def voltage_setpoint(self) -> float:
        """The voltage setpoint as the instrument holds it (needs ``get_voltage``)."""
        return self.ask_float("get_voltage")

    def current_limit(self) -> float:
        """The current limit as the instrument holds it (needs ``get_current_limit``)."""
        return self.ask_float("get_current_limit")


class ScpiMeter(ScpiInstrument):
    """A DC multimeter driven by a ``meter`` profile (implements ``roles.Meter``)."""

    role = "meter"

    def __init__(self, transport: Transport, profile: Profile, *, identity: str = ""):
        super().__init__(transport, profile, identity=identity)
        self.function: str | None = None  # "voltage" or "current" once configured

    def configure_voltage(self, range_volts: float | None = None, nplc: float = 1.0) -> None:
        """Select DC volts at ``range_volts`` (``None``: autorange) and an integration time."""
        self._configure("voltage", range_volts, nplc)

    def configure_current(self, range_amps: float | None = None, nplc: float = 1.0) -> None:
        """Select DC amps at ``range_amps`` (``None``: autorange) and an integration time."""
        self._configure("current", range_amps, nplc)

    def _configure(self, function: str, value_range: float | None, nplc: float) -> None:
        if value_range is None:
            self.configure(f"configure_{function}_auto")
        else:
            self.configure(f"configure_{function}_range", range=float(value_range))
        self.configure(f"set_{function}_nplc", nplc=float(nplc))
        self.function = function

    def read(self) -> float:
        """Take one reading in the configured function (+inf/-inf/nan for the special values)."""
        return self.ask_float("read")

    @property
    def can_trigger(self) -> bool:
        """True when the profile splits a reading into :meth:`trigger` and :meth:`fetch`."""
        return self.profile.has("initiate") and self.profile.has("fetch")

    def trigger(self) -> None:
        """Start one reading and return at once (no error-queue read: :meth:`fetch` checks for both)."""
        self._triggered_on = getattr(self.transport, "reopen_count", 0)
        for line in self.profile.lines("initiate"):
            self.transport.write(line, idempotent=True)  # another reading of the same state: safe to repeat

    def fetch(self) -> float:
        """Collect the reading :meth:`trigger` started, then read the error queue (an INIT the meter
        refused would leave an older reading to fetch)."""
        try:
            value = self.ask_float("fetch")
            self.check_errors(self.profile.lines("initiate")[-1])
        except InstrumentReportedError as exc:
            # the trigger was refused, or there is no reading to fetch: take one the plain way
            if exc.code not in TRANSIENT_ERROR_CODES and exc.code != NO_READING_CODE:
                raise
            self.repeats += 1
            return self.read()
        if getattr(self.transport, "reopen_count", 0) != getattr(self, "_triggered_on", 0):
            return self.read()  # the link was reopened after the trigger: that reading may be an old one
        return value

    def nplc_setting(self, function: str | None = None) -> float:
        """The integration time the instrument holds for ``function`` (default: the configured one)."""
        return self.ask_float(f"get_{function or self.function or 'voltage'}_nplc")


from benchlab.instruments.scpi_smu import ScpiSmu  # noqa: E402  (its own module; imported here for callers)
